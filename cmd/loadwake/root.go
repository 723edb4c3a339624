package main

import (
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/spf13/cobra"
)

func newRootCommand(g *cli.Globals) *cobra.Command {
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
		Version:       cli.BuildVersion(),
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.SetVersionTemplate("loadwake {{.Version}}\n")
	root.PersistentFlags().StringVar(&g.Store, "store", g.Store, "`DIR` of the history store ($"+cli.EnvStore+" when set)")
	root.PersistentFlags().BoolVarP(&g.Quiet, "quiet", "q", false, "no progress output on stderr")
	root.SetFlagErrorFunc(func(_ *cobra.Command, err error) error { return cli.UsageError{Msg: err.Error()} })

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
