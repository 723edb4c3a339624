// Command loadwake evaluates bulk imports into OpenStreetMap from edit history.
package main

import (
	"context"
	"errors"
	"io"
	"os"
	"os/signal"
	"syscall"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	go func() {
		// After the first Ctrl-C the command winds down; a second one ends it at once.
		<-ctx.Done()
		stop()
	}()
	code := run(ctx, os.Args[1:], os.Getenv, os.Stdout, os.Stderr)
	stop()
	os.Exit(code)
}

// run executes the command line args and returns the exit code; errors are
// printed on stderr led by the command's name, with what to do.
func run(ctx context.Context, args []string, getenv func(string) string, stdout, stderr io.Writer) int {
	root := newRootCommand(cli.NewGlobals(getenv))
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	cmd, err := root.ExecuteContextC(ctx)
	if err == nil {
		return cli.ExitOK
	}
	if cmd != nil && !cmd.Runnable() && !errors.As(err, new(cli.UsageError)) {
		// A command that only groups others fails on a wrong command line: "loadwake frobnicate".
		err = cli.UsageError{Msg: err.Error()}
	}
	code := cli.ExitCode(ctx, err)
	io.WriteString(stderr, cli.ErrorMessage(cmd, code, err))
	return code
}
