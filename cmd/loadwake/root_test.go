package main

import (
	"bytes"
	"context"
	"testing"
)

// execRoot runs the root command with args, as a user would from a shell,
// and returns what it wrote to stdout and stderr.
func execRoot(t testing.TB, args ...string) (stdout, stderr string, err error) {
	t.Helper()
	root := newRootCommand(newGlobalOptions())
	var out, errb bytes.Buffer
	root.SetOut(&out)
	root.SetErr(&errb)
	root.SetArgs(args)
	err = root.ExecuteContext(context.Background())
	return out.String(), errb.String(), err
}

// execRootOut is execRoot for tests that read stdout only.
func execRootOut(t testing.TB, args ...string) (string, error) {
	t.Helper()
	out, _, err := execRoot(t, args...)
	return out, err
}
