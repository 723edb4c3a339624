package main

import (
	"github.com/spf13/cobra"
)

// globalOptions holds the flags every command shares. One value is built in
// main and passed by pointer to each newXCommand.
type globalOptions struct {
	store string // directory of the Badger history store
	quiet bool   // no progress output
}

// envStore names the environment variable holding the default store.
const envStore = "LOADWAKE_STORE"

// newGlobalOptions returns the defaults: the store of $LOADWAKE_STORE, read
// through getenv, or ./loadwake.db.
func newGlobalOptions(getenv func(string) string) *globalOptions {
	g := &globalOptions{store: "./loadwake.db"}
	if s := getenv(envStore); s != "" {
		g.store = s
	}
	return g
}

func newRootCommand(g *globalOptions) *cobra.Command {
	root := &cobra.Command{
		Use:   "loadwake",
		Short: "Evaluate bulk imports into OpenStreetMap from edit history",
		Long: `loadwake reads OpenStreetMap history files into an embedded store, classifies
every edit into layers (geometry, attribute, new_feature, deletion), finds past
imports, compares follow-on activity in import areas with matched untouched
areas, lists attribute tags imported features went without, and assesses a
proposed import against past ones.

Every command takes --store DIR (default $LOADWAKE_STORE, else ./loadwake.db).
--json FILE, --md FILE and --csv FILE write a file, "-" meaning stdout (the
usual text then goes to stderr); --out DIR names an output folder. Exit codes:
0 ok, 1 an error in the data or the run, 2 a wrong command line, 130
interrupted.

Its figures are evidence for a community's review, not a verdict: imports follow
the community's import guidelines and local review.`,
		Version:       buildVersion(),
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetVersionTemplate("loadwake {{.Version}}\n")
	root.PersistentFlags().StringVar(&g.store, "store", g.store, "`DIR` of the history store ($"+envStore+" when set)")
	root.PersistentFlags().BoolVarP(&g.quiet, "quiet", "q", false, "no progress output on stderr")
	root.SetFlagErrorFunc(func(_ *cobra.Command, err error) error { return usageError{msg: err.Error()} })

	root.AddCommand(
		// commands: one constructor per file, in the order of the job
		newIngestCommand(g), newStatsCommand(g),
		newRulesCommand(g),
		newClassifyCommand(g),
		newImportsCommand(g),
		newPanelCommand(g),
		newAuditCommand(g),
		newChecklistCommand(g), newAssessCommand(g), newPlanCommand(g),
		newEstimateCommand(g),
		newSimulateCommand(g),
		newReportCommand(g), newDemoCommand(g),
		newVersionCommand(),
		newUnitsCommand(g),
		newExportCommand(g),
	)
	return root
}
