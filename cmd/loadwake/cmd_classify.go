package main

import (
	"fmt"
	"os"

	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/osm"
	"github.com/spf13/cobra"
	"golang.org/x/term"
)

// classifyOptions holds the flags of `loadwake classify`.
type classifyOptions struct {
	rules string // rule file; "" means the built-in rules
	force bool   // re-classify even when rules and data are unchanged
}

func newClassifyCommand(g *globalOptions) *cobra.Command {
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
		Args: noArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runClassify(cmd, g, &o)
		},
	}
	cmd.Flags().StringVar(&o.rules, "rules", "", "rule file (default: the built-in rules; see loadwake rules show)")
	cmd.Flags().BoolVar(&o.force, "force", false, "re-classify even when rules and data are unchanged")
	return cmd
}

func runClassify(cmd *cobra.Command, g *globalOptions, o *classifyOptions) error {
	r, err := loadRules(o.rules)
	if err != nil {
		return err
	}
	st, err := openStore(g)
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
func classifyStore(cmd *cobra.Command, g *globalOptions, st *ingest.Store, r *rules.RuleSet, force bool) error {
	opts := layers.Options{Force: force}
	errw := cmd.ErrOrStderr()
	f, isFile := errw.(*os.File)
	tty := isFile && term.IsTerminal(int(f.Fd()))
	if !g.quiet && tty {
		opts.Progress = func(t osm.Type, n int64) { fmt.Fprintf(errw, "\rclassifying %s versions: %d ", t, n) }
	}
	sum, err := layers.Run(cmd.Context(), st, r, opts)
	if opts.Progress != nil {
		fmt.Fprint(errw, "\r\033[K")
	}
	if err != nil {
		return err
	}
	return layers.WriteSummary(cmd.OutOrStdout(), sum)
}
