package main

import (
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
	"github.com/spf13/cobra"
)

// classifyOptions holds the flags of `loadwake classify`.
type classifyOptions struct {
	rules string // rule file; "" means the built-in rules
	force bool   // re-classify even when rules and data are unchanged
}

func newClassifyCommand(g *cli.Globals) *cobra.Command {
	var o classifyOptions
	cmd := &cobra.Command{
		Use:   "classify",
		Short: "Classify every stored edit into layers and print a summary",
		Long: `classify compares every stored version with its predecessor and records edit
events in the layers geometry, attribute, new_feature and deletion (versions
that touched only provenance keys such as source or created_by are counted
apart as bookkeeping). The events are kept in the store for the later steps.
It does nothing when the rules and the stored data are unchanged since the last
run, unless --force.`,
		Args:        cli.NoArgs,
		Annotations: map[string]string{cli.AnnInterrupted: "classification stopped: the events of finished batches are kept; rerun classify to complete it"},
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runClassify(cmd, g, &o)
		},
	}
	cmd.Flags().StringVar(&o.rules, "rules", "", "rule file (default: the built-in rules; see loadwake rules show)")
	cmd.Flags().BoolVar(&o.force, "force", false, "re-classify even when rules and data are unchanged")
	return cmd
}

func runClassify(cmd *cobra.Command, g *cli.Globals, o *classifyOptions) error {
	r, err := cli.LoadRules(o.rules)
	if err != nil {
		return err
	}
	st, err := cli.OpenStore(g)
	if err != nil {
		return err
	}
	err = classifyStore(cmd, g, st, r, o.force)
	if cerr := st.Close(); err == nil {
		err = cerr
	}
	return err
}

// classifyStore runs the classification pass over st and prints its summary.
func classifyStore(cmd *cobra.Command, g *cli.Globals, st *ingest.Store, r *rules.RuleSet, force bool) error {
	stats, err := st.Stats(cmd.Context())
	if err != nil {
		return err
	}
	opts := layers.Options{Force: force}
	hook, done := cli.NewProgress(cmd, g).Classify(stats.Versions())
	opts.Progress = hook
	sum, err := layers.Run(cmd.Context(), st, r, opts)
	done()
	if err != nil {
		return err
	}
	return layers.WriteSummary(cmd.OutOrStdout(), sum)
}
