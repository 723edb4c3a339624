// Command loadwake evaluates bulk imports into OpenStreetMap from edit history.
package main

import (
	"context"
	"errors"
	"fmt"
	"os"
	"os/signal"
	"syscall"
)

func main() {
	ctx, stop := signal.NotifyContext(context.Background(), os.Interrupt, syscall.SIGTERM)
	defer stop()
	root := newRootCommand(newGlobalOptions())
	err := root.ExecuteContext(ctx)
	os.Exit(exitCode(ctx, err))
}

// Exit codes, set only here.
const (
	exitOK        = 0
	exitFailure   = 1
	exitUsage     = 2
	exitCancelled = 130
)

func exitCode(ctx context.Context, err error) int {
	switch {
	case err == nil:
		return exitOK
	case errors.Is(err, context.Canceled) || ctx.Err() != nil:
		fmt.Fprintln(os.Stderr, "loadwake: interrupted; the store is consistent, rerun to continue")
		return exitCancelled
	case errors.As(err, new(usageError)):
		fmt.Fprintln(os.Stderr, "loadwake:", err)
		return exitUsage
	default:
		fmt.Fprintln(os.Stderr, "loadwake:", err)
		return exitFailure
	}
}
