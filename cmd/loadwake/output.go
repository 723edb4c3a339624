package main

import (
	"fmt"
	"io"
	"os"

	"github.com/spf13/cobra"
	"github.com/spf13/pflag"
)

// stdoutPath is the FILE of --json, --md and --csv that means stdout.
const stdoutPath = "-"

// addFileFlag adds --name FILE, an output file where "-" means stdout.
func addFileFlag(f *pflag.FlagSet, p *string, name, what string) {
	f.StringVar(p, name, "", "write "+what+" to `FILE` (- for stdout)")
}

// addOutFlag adds --out DIR, the output folder.
func addOutFlag(f *pflag.FlagSet, p *string, what string) {
	f.StringVar(p, "out", *p, "write "+what+" into folder `DIR` (created when missing)")
}

// outputs writes a command's output files. At most one goes to stdout; the
// command's usual text then goes to stderr so that stdout can be piped.
type outputs struct {
	stdout, text io.Writer
}

// newOutputs checks the output paths of cmd's flags and returns their writer.
func newOutputs(cmd *cobra.Command, paths ...string) (*outputs, error) {
	o := &outputs{stdout: cmd.OutOrStdout(), text: cmd.OutOrStdout()}
	n := 0
	for _, p := range paths {
		if p == stdoutPath {
			n++
		}
	}
	switch {
	case n > 1:
		return nil, usagef("only one of --json, --md and --csv can be - (stdout); name a file for the others")
	case n == 1:
		o.text = cmd.ErrOrStderr()
	}
	return o, nil
}

// write writes one output: nothing when path is empty, stdout when it is
// "-", else the file path, which it reports on the text writer.
func (o *outputs) write(path string, fill func(io.Writer) error) error {
	switch path {
	case "":
		return nil
	case stdoutPath:
		return fill(o.stdout)
	}
	if err := writeFile(path, fill); err != nil {
		return err
	}
	fmt.Fprintln(o.text, "wrote", path)
	return nil
}

// writeFile creates path and lets fill write it.
func writeFile(path string, fill func(w io.Writer) error) error {
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
