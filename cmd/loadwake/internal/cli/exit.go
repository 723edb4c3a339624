package cli

import (
	"context"
	"errors"
)

// Exit codes, the same for every command (the README's table). They are set
// only here.
const (
	ExitOK          = 0   // the command did its job
	ExitFailure     = 1   // an error in the data or the run: a missing, unreadable or malformed file, a study that cannot be built
	ExitUsage       = 2   // the command line is wrong: unknown command or flag, bad or conflicting flag values, wrong arguments
	ExitInterrupted = 130 // Ctrl-C (SIGINT) or SIGTERM stopped the command
)

// ExitCode maps the error a command returned to the process's exit code.
func ExitCode(ctx context.Context, err error) int {
	switch {
	case err == nil:
		return ExitOK
	case errors.Is(err, context.Canceled) || ctx.Err() != nil:
		return ExitInterrupted
	case errors.As(err, new(UsageError)):
		return ExitUsage
	default:
		return ExitFailure
	}
}
