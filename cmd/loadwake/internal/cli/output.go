package cli

import (
	"fmt"
	"io"
	"os"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"
)

// StdoutPath is the FILE of --json, --md and --csv that means stdout.
const StdoutPath = "-"

// AddFileFlag adds --name FILE, an output file where "-" means stdout.
func AddFileFlag(f *pflag.FlagSet, p *string, name, what string) {
	f.StringVar(p, name, "", "write "+what+" to `FILE` (- for stdout)")
}

// AddOutFlag adds --out DIR, the output folder.
func AddOutFlag(f *pflag.FlagSet, p *string, what string) {
	f.StringVar(p, "out", *p, "write "+what+" into folder `DIR` (created when missing)")
}

// Outputs writes a command's output files. At most one goes to stdout; the
// command's usual text then goes to stderr so that stdout can be piped.
type Outputs struct {
	Stdout io.Writer // where the output named "-" goes
	Text   io.Writer // where the command's usual text goes: stdout, or stderr when an output takes stdout
}

// NewOutputs checks the output paths of cmd's flags and returns their writer.
func NewOutputs(cmd *cobra.Command, paths ...string) (*Outputs, error) {
	o := &Outputs{Stdout: cmd.OutOrStdout(), Text: cmd.OutOrStdout()}
	n := 0
	for _, p := range paths {
		if p == StdoutPath {
			n++
		}
	}
	switch {
	case n > 1:
		return nil, Usagef("only one of --json, --md and --csv can be - (stdout); name a file for the others")
	case n == 1:
		o.Text = cmd.ErrOrStderr()
	}
	return o, nil
}

// Write writes one output: nothing when path is empty, stdout when it is
// "-", else the file path, which it reports on the text writer.
func (o *Outputs) Write(path string, fill func(io.Writer) error) error {
	switch path {
	case "":
		return nil
	case StdoutPath:
		return fill(o.Stdout)
	}
	if err := WriteFile(path, fill); err != nil {
		return err
	}
	fmt.Fprintln(o.Text, "wrote", path)
	return nil
}

// WriteFile creates path and lets fill write it.
func WriteFile(path string, fill func(w io.Writer) error) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("create output: %w", err)
	}
	if err := fill(f); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("write %s: %w", path, err)
	}
	return nil
}
