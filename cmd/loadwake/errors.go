package main

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
	"github.com/loadwake/loadwake/rules"
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
	case errors.Is(err, errIsDir), errors.Is(err, syscall.EISDIR):
		return "name the files inside the folder, not the folder (a shell pattern such as DIR/*.osc.gz works)"
	case errors.Is(err, fs.ErrNotExist):
		return "check the path: no such file or folder"
	case errors.Is(err, fs.ErrPermission):
		return "check the file's permissions"
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
	case errors.Is(err, match.ErrMatch), errors.Is(err, match.ErrModel):
		return "too few untouched units to match: lower --k, drop --caliper, or choose smaller units (a higher tiles:Z or finer polygons)"
	case errors.Is(err, spatial.ErrUnits):
		return "check --units: tiles:Z (a lower Z gives fewer, larger tiles), or a GeoJSON file of polygons in longitude/latitude with an id property (--unit-id)"
	case errors.Is(err, panel.ErrInvalid):
		return "fix the panel file at the row named above, or name its columns with --unit, --time, --first-treated and --outcome"
	case errors.Is(err, proposal.ErrInvalid):
		return "fix the proposal file at the position named above (OSM XML, OsmChange or GeoJSON with tags as properties)"
	case errors.Is(err, study.ErrStudy):
		return "the study cannot be built as asked: widen --before/--after, lower --min-intensity, or choose other units"
	case errors.Is(err, episode.ErrNoImport):
		return "list the store's imports with \"loadwake imports\", then pass --import ID, --account NAME or --changesets FILE"
	case errors.Is(err, sim.ErrOutputExists):
		return "pass --force to replace the files, or choose another --out"
	}
	return ""
}
