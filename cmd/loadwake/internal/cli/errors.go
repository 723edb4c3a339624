package cli

import (
	"errors"
	"fmt"
	"io/fs"
	"strings"
	"syscall"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/loadwake/loadwake/rules"
)

// UsageError marks an error in how the command was called (exit code 2).
type UsageError struct{ Msg string }

func (e UsageError) Error() string { return e.Msg }

func Usagef(format string, args ...any) error {
	return UsageError{Msg: fmt.Sprintf(format, args...)}
}

// ErrNoStore is returned when --store names no folder.
var ErrNoStore = errors.New("no store")

// ErrIsDir is returned when a file argument names a folder.
var ErrIsDir = errors.New("is a folder, not a file")

// AnnInterrupted is the key of a command's annotation that says what an
// interruption leaves behind.
const AnnInterrupted = "interrupted"

// InterruptedReadOnly is what an interruption leaves behind for the commands
// that only read the store.
const InterruptedReadOnly = "the store was only read and is unchanged; files already reported as written are complete, the others were not written; rerun the same command"

// ErrorMessage is what stderr shows for err: a line led by the command's
// name ("loadwake audit: ..."), then a line saying what to do.
func ErrorMessage(cmd *cobra.Command, code int, err error) string {
	name := "loadwake"
	if cmd != nil {
		name = cmd.CommandPath()
	}
	short := name[strings.LastIndex(name, " ")+1:]
	msg := strings.TrimPrefix(err.Error(), short+": ")
	var todo string
	switch code {
	case ExitInterrupted:
		msg = "interrupted"
		todo = "nothing was changed"
		if cmd != nil && cmd.Annotations[AnnInterrupted] != "" {
			todo = cmd.Annotations[AnnInterrupted]
		}
	case ExitUsage:
		todo = fmt.Sprintf("see %q for the flags and arguments", name+" --help")
	default:
		todo = Hint(err)
	}
	if todo == "" {
		return fmt.Sprintf("%s: %s\n", name, msg)
	}
	return fmt.Sprintf("%s: %s\n  %s\n", name, msg, todo)
}

// errorHint pairs sentinel errors with what to do about them, first match wins.
type errorHint struct {
	causes []error
	todo   string
}

// errorHints returns the hints in the order they are tried: the file system
// first (a missing file is the cause whatever package met it), then each
// package's sentinels.
func errorHints() []errorHint {
	return []errorHint{
		{[]error{ErrNoStore}, "run \"loadwake ingest FILE...\" to make one, or name it with --store DIR (or LOADWAKE_STORE)"},
		{[]error{ErrIsDir, syscall.EISDIR}, "name the files inside the folder, not the folder (a shell pattern such as DIR/*.osc.gz works)"},
		{[]error{fs.ErrNotExist}, "check the path: no such file or folder"},
		{[]error{fs.ErrPermission}, "check the file's permissions"},
		{[]error{ingest.ErrLocked}, "another loadwake process uses this store: wait until it ends, or pass another --store"},
		{[]error{ingest.ErrSchemaNewer}, "use the loadwake version that wrote the store (loadwake version), or ingest into a new --store"},
		{[]error{osmfile.ErrFormat, osmfile.ErrOrder}, "fix or replace the file at the position named above; what was stored before it is kept, and a rerun adds no duplicates"},
		{[]error{osmfile.ErrUnknown}, "give an OSM PBF, OSM XML, OsmChange or changeset file (plain, gzip or bzip2)"},
		{[]error{rules.ErrInvalid}, "fix the rule file; \"loadwake rules check FILE\" lists every problem as file:line:column"},
		{[]error{match.ErrMatch, match.ErrModel}, "too few untouched units to match: lower --k, drop --caliper, or choose smaller units (a higher tiles:Z or finer polygons)"},
		{[]error{spatial.ErrUnits}, "check --units: tiles:Z (a lower Z gives fewer, larger tiles), or a GeoJSON file of polygons in longitude/latitude with an id property (--unit-id)"},
		{[]error{panel.ErrInvalid}, "fix the panel file at the row named above, or name its columns with --unit, --time, --first-treated and --outcome"},
		{[]error{proposal.ErrInvalid}, "fix the proposal file at the position named above (OSM XML, OsmChange or GeoJSON with tags as properties)"},
		{[]error{study.ErrAssignment}, "fix the treatment file at the line named above: a header such as unit,start, one row per treated unit with its first treated month (YYYY-MM), ids as in --units"},
		{[]error{study.ErrAssignment}, "fix the treatment file at the line named above: a header such as unit,start, one row per treated unit with its first treated month (YYYY-MM), ids as in --units"},
		{[]error{study.ErrStudy}, "the study cannot be built as asked: widen --before/--after, lower --min-intensity, or choose other units"},
		{[]error{episode.ErrNoImport}, "list the store's imports with \"loadwake imports\", then pass --import ID, --account NAME or --changesets FILE"},
		{[]error{sim.ErrOutputExists}, "pass --force to replace the files, or choose another --out"},
	}
}

// Hint says what to do about a data or run error, from the sentinel it
// wraps; "" when none is known.
func Hint(err error) string {
	for _, h := range errorHints() {
		for _, c := range h.causes {
			if errors.Is(err, c) {
				return h.todo
			}
		}
	}
	return ""
}
