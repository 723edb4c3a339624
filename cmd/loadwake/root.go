package main

import (
	"fmt"

	"github.com/spf13/cobra"
)

// globalOptions holds the flags every command shares. One value is built in
// main and passed by pointer to each newXCommand.
type globalOptions struct {
	store string // directory of the Badger history store
	quiet bool   // no progress output
}

func newGlobalOptions() *globalOptions {
	return &globalOptions{store: "./loadwake.db"}
}

// usageError marks an error in how the command was called (exit code 2).
type usageError struct{ msg string }

func (e usageError) Error() string { return e.msg }

func usagef(format string, args ...any) error {
	return usageError{msg: fmt.Sprintf(format, args...)}
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

Its figures are evidence for a community's review, not a verdict: imports follow
the community's import guidelines and local review.`,
		SilenceUsage:  true,
		SilenceErrors: true,
	}
	root.PersistentFlags().StringVar(&g.store, "store", g.store, "directory of the history store")
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
		newChecklistCommand(g), newAssessCommand(g),
		newEstimateCommand(g),
		newSimulateCommand(g),
		newReportCommand(g), newDemoCommand(g),
		newExportCommand(g),
	)
	return root
}
