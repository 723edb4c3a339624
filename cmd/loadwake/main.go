// Command loadwake evaluates bulk imports into OpenStreetMap from edit history.
package main

import (
	"context"
	"errors"
	"io"
	"os"
	"os/signal"
	"syscall"
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
	root := newRootCommand(newGlobalOptions(getenv))
	root.SetArgs(args)
	root.SetOut(stdout)
	root.SetErr(stderr)
	cmd, err := root.ExecuteContextC(ctx)
	if err == nil {
		return exitOK
	}
	if cmd != nil && !cmd.Runnable() && !errors.As(err, new(usageError)) {
		// A command that only groups others fails on a wrong command line: "loadwake frobnicate".
		err = usageError{msg: err.Error()}
	}
	code := exitCode(ctx, err)
	io.WriteString(stderr, errorMessage(cmd, code, err))
	return code
}

// Exit codes, the same for every command (the README's table). They are set
// only here.
const (
	exitOK          = 0   // the command did its job
	exitFailure     = 1   // an error in the data or the run: a missing, unreadable or malformed file, a study that cannot be built
	exitUsage       = 2   // the command line is wrong: unknown command or flag, bad or conflicting flag values, wrong arguments
	exitInterrupted = 130 // Ctrl-C (SIGINT) or SIGTERM stopped the command
)

// exitCode maps the error a command returned to the process's exit code.
func exitCode(ctx context.Context, err error) int {
	switch {
	case err == nil:
		return exitOK
	case errors.Is(err, context.Canceled) || ctx.Err() != nil:
		return exitInterrupted
	case errors.As(err, new(usageError)):
		return exitUsage
	default:
		return exitFailure
	}
}
