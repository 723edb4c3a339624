package main

import (
	"fmt"
	"io"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// panelOptions holds the flags of `loadwake panel`.
type panelOptions struct {
	study cli.StudyFlags
	csv   string // output CSV
	all   bool   // every clean unit instead of the matched set
}

func newPanelCommand(g *cli.Globals) *cobra.Command {
	var o panelOptions
	cmd := &cobra.Command{
		Use:   "panel --units SPEC --csv FILE [--import ID]",
		Short: "Build an import's monthly outcome panel with matched control units",
		Long: `panel counts, for every spatial unit and month around an import, the follow-on
edit events per layer (geometry, attribute, new_feature, deletion), per attribute
key family ("attribute:names", ...), and the distinct contributors, newcomers and
established contributors. The import's own changesets, every other detected
import's changesets and, unless --keep-import-accounts, the import's accounts
are left out.

Units where the import's features reach --min-intensity of all features are
treated from the month the import arrived; units any import touched otherwise
are excluded; each treated unit is matched with --k untouched units on its
pre-import activity (Mahalanobis distance, or --propensity). It prints the
balance table and writes the panel as CSV (one row per unit and month; columns
unit, month, first_treated, weight, cluster, then one per outcome, then one per
pre-period covariate named covariate:NAME), the format loadwake estimate reads
with no further flags.`,
		Args:        cli.NoArgs,
		Annotations: map[string]string{cli.AnnInterrupted: cli.InterruptedReadOnly},
		RunE:        func(cmd *cobra.Command, _ []string) error { return runPanel(cmd, g, &o) },
	}
	o.study.AddFlags(cmd, g)
	o.study.AddTreatmentFlags(cmd)
	cli.AddFileFlag(cmd.Flags(), &o.csv, "csv", "the panel as CSV")
	cmd.Flags().BoolVar(&o.all, "all", false, "write every clean unit (unweighted) instead of the matched set")
	return cmd
}

func runPanel(cmd *cobra.Command, g *cli.Globals, o *panelOptions) error {
	outs, err := cli.NewOutputs(cmd, o.csv)
	if err != nil {
		return err
	}
	in, err := o.study.Open(cmd, g)
	if err != nil {
		return err
	}
	defer in.Store.Close()
	done := cli.NewProgress(cmd, g).Step("panel " + in.Label() + ": build the study")
	st, err := in.BuildStudy(cmd.Context(), o.study.StudyOptions())
	done()
	if err != nil {
		return err
	}
	out := outs.Text
	what := "import " + in.Label()
	if in.Assignment != nil {
		what = "event " + in.Label() + " (" + o.study.Treatment + ")"
	}
	fmt.Fprintf(out, "%s, panel %s to %s, %d outcomes\n", what, st.Window[0], st.Window[1], len(st.Panel.Outcomes))
	if err := audit.WriteUnitSummary(out, st); err != nil {
		return err
	}
	if err := audit.WriteBalance(out, st.Balance); err != nil {
		return err
	}
	for _, n := range st.Notes {
		fmt.Fprintln(out, "note:", n)
	}
	p := st.Panel
	if o.all {
		p = st.All
	}
	if o.csv != "" {
		fmt.Fprintf(out, "panel: %d units x %d months\n", len(p.Units), p.Months)
	}
	return outs.Write(o.csv, func(w io.Writer) error { return panel.WriteCSV(w, p) })
}
