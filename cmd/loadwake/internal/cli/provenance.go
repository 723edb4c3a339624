package cli

import (
	"context"
	"os"
	"strings"
	"time"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/ingest"
)

// CommandLine is the exact command that ran, each argument quoted when it
// holds anything a shell would split or expand.
func CommandLine() string {
	args := make([]string, len(os.Args))
	for i, a := range os.Args {
		if i == 0 {
			a = "loadwake"
		}
		if a == "" || strings.ContainsAny(a, " \t\n'\"\\$`*?[]{}()<>|&;#~!") {
			a = "'" + strings.ReplaceAll(a, "'", `'\''`) + "'"
		}
		args[i] = a
	}
	return strings.Join(args, " ")
}

// Generator says what makes a report now, from the store st (nil: no store).
func Generator(ctx context.Context, st *ingest.Store, invented bool) audit.Generator {
	g := audit.Generator{Version: BuildVersion(), CommandLine: CommandLine(), Generated: time.Now(), Invented: invented}
	if st != nil {
		if stats, err := st.Stats(ctx); err == nil {
			g.DataFirst, g.DataLast = stats.FirstEdit, stats.LastEdit
		}
	}
	return g
}
