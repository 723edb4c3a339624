package main

import (
	"context"
	"errors"
	"fmt"
	"io/fs"
	"strings"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// Exit codes, the same for every command (the README's table). They are set
// only here.
const (
	exitOK          = 0   // the command did its job
	exitFailure     = 1   // an error in the data or the run: a missing, unreadable or malformed file, a study that cannot be built
	exitUsage       = 2   // the command line is wrong: unknown command or flag, bad or conflicting flag values, wrong arguments
	exitInterrupted = 130 // Ctrl-C (SIGINT) or SIGTERM stopped the command
)

// usageError marks an error in how the command was called (exit code 2).
type usageError struct{ msg string }

func (e usageError) Error() string { return e.msg }

func usagef(format string, args ...any) error {
	return usageError{msg: fmt.Sprintf(format, args...)}
}

// errNoStore is returned when --store names no folder.
var errNoStore = errors.New("no store")

// errIsDir is returned when a file argument names a folder.
var errIsDir = errors.New("is a folder, not a file")

// annInterrupted is the key of a command's annotation that says what an
// interruption leaves behind.
const annInterrupted = "interrupted"

// interruptedReadOnly is what an interruption leaves behind for the commands
// that only read the store.
const interruptedReadOnly = "the store was only read and is unchanged; files already reported as written are complete, the others were not written; rerun the same command"

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

// errorMessage is what stderr shows for err: a line led by the command's
// name ("loadwake audit: ..."), then a line saying what to do.
func errorMessage(cmd *cobra.Command, code int, err error) string {
	name := "loadwake"
	if cmd != nil {
		name = cmd.CommandPath()
	}
	short := name[strings.LastIndex(name, " ")+1:]
	msg := strings.TrimPrefix(err.Error(), short+": ")
	var todo string
	switch code {
	case exitInterrupted:
		msg = "interrupted"
		todo = "nothing was changed"
		if cmd != nil && cmd.Annotations[annInterrupted] != "" {
			todo = cmd.Annotations[annInterrupted]
		}
	case exitUsage:
		todo = fmt.Sprintf("see %q for the flags and arguments", name+" --help")
	default:
		todo = hint(err)
	}
	if todo == "" {
		return fmt.Sprintf("%s: %s\n", name, msg)
	}
	return fmt.Sprintf("%s: %s\n  %s\n", name, msg, todo)
}

// hint says what to do about a data or run error, from the sentinel it wraps.
func hint(err error) string {
	switch {
	case errors.Is(err, errNoStore):
		return "run \"loadwake ingest FILE...\" to make one, or name it with --store DIR (or LOADWAKE_STORE)"
	case errors.Is(err, ingest.ErrLocked):
		return "another loadwake process uses this store: wait until it ends, or pass another --store"
	case errors.Is(err, ingest.ErrSchemaNewer):
		return "use the loadwake version that wrote the store (loadwake version), or ingest into a new --store"
	case errors.Is(err, ingest.ErrFormat), errors.Is(err, ingest.ErrOrder):
		return "fix or replace the file at the position named above; what was stored before it is kept, and a rerun adds no duplicates"
	case errors.Is(err, ingest.ErrUnknown):
		return "give an OSM PBF, OSM XML, OsmChange or changeset file (plain, gzip or bzip2)"
	case errors.Is(err, rules.ErrInvalid):
		return "fix the rule file; \"loadwake rules check FILE\" lists every problem as file:line:column"
	case errors.Is(err, episode.ErrNoImport):
		return "list the store's imports with \"loadwake imports\", then pass --import ID, --account NAME or --changesets FILE"
	case errors.Is(err, sim.ErrOutputExists):
		return "pass --force to replace the files, or choose another --out"
	case errors.Is(err, errIsDir):
		return "name the files inside the folder (a shell pattern such as DIR/*.osc.gz works)"
	case errors.Is(err, fs.ErrNotExist):
		return "check the path: no such file or folder"
	case errors.Is(err, fs.ErrPermission):
		return "check the file's permissions"
	}
	return ""
}
