package main

import (
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"text/tabwriter"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/spf13/cobra"
)

// estimateOptions holds the flags of `loadwake estimate`.
type estimateOptions struct {
	panel        string   // long-format panel CSV
	unit         string   // column names
	time         string   //
	firstTreated string   //
	outcomes     []string //
	cluster      string   //
	weight       string   //
	covariates   []string // pre-period covariates for the doubly robust cs-att
	json         string   // JSON output file; "-" for stdout
	pre, post    int      // event window
	draws        int
	seed         uint64
	inference    string
}

func newEstimateCommand(g *cli.Globals) *cobra.Command {
	d := did.DefaultOptions()
	o := estimateOptions{unit: "unit", time: "month", firstTreated: "first_treated",
		pre: d.Window.Pre, post: d.Window.Post, draws: d.Draws, seed: d.Seed, inference: d.Inference}
	cmd := &cobra.Command{
		Use:   "estimate --panel FILE.csv [--outcome COL...]",
		Short: "Estimate how follow-on activity changed in treated areas against matched controls",
		Long: `estimate reads a unit-by-month panel in long format (one row per unit and
month) and estimates, per outcome, how activity changed in treated units after
their first treated month compared with never-treated (matched) units:

  cs-att       group-time ATT (Callaway & Sant'Anna), aggregated by cohort size
  ppml-twfe    Poisson regression stacked by cohort, unit and month fixed effects
  twfe-linear  linear event study (a cross-check; biased with staggered timing)
  did-2x2      classic before/after x treated/control comparison

Each row gives the effect, its 95% interval (of the relative effect where one
is given), p-value, the joint pre-trend test, unit counts and the inference
method. With fewer than 30 treated clusters the intervals come from a wild or
multiplier bootstrap. A CSV written by loadwake's panel export (loadwake panel,
or panel.csv in a report folder) needs no further flags: its weight and cluster
columns and all its outcomes are used, so the estimates equal the audit's. Name
the columns of your own file with the flags.`,
		Args:        cli.NoArgs,
		Annotations: map[string]string{cli.AnnInterrupted: "nothing was written; rerun the same command"},
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runEstimate(cmd, g, &o)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.panel, "panel", "", "panel CSV file (required)")
	f.StringVar(&o.unit, "unit", o.unit, "column with the unit identifier")
	f.StringVar(&o.time, "time", o.time, "column with the month (YYYY-MM or YYYY-MM-DD)")
	f.StringVar(&o.firstTreated, "first-treated", o.firstTreated, "column with the first treated month (empty for never treated)")
	f.StringSliceVar(&o.outcomes, "outcome", nil, "outcome column(s), repeatable or comma-separated (default for loadwake's panel export: all)")
	f.StringVar(&o.cluster, "cluster", "", "column with the cluster for inference (default: the export's cluster column, else the unit)")
	f.StringVar(&o.weight, "weight", "", "column with matching weights (default: the export's weight column, else 1)")
	f.StringSliceVar(&o.covariates, "covariate", nil, "pre-period covariate column(s), constant within a unit; cs-att becomes doubly robust")
	cli.AddFileFlag(f, &o.json, "json", "all estimates as JSON")
	f.IntVar(&o.pre, "window-before", o.pre, "months before treatment the estimators use")
	f.IntVar(&o.post, "window-after", o.post, "months from treatment on the estimators use")
	f.IntVar(&o.draws, "draws", o.draws, "bootstrap draws")
	f.Uint64Var(&o.seed, "seed", o.seed, "seed of the bootstrap draws")
	f.StringVar(&o.inference, "inference", o.inference, "auto, analytic or bootstrap")
	return cmd
}

func runEstimate(cmd *cobra.Command, g *cli.Globals, o *estimateOptions) error {
	if o.panel == "" {
		return cli.Usagef("--panel FILE.csv is required")
	}
	if err := cli.CheckEstimator(o.draws, o.inference, o.pre, o.post); err != nil {
		return err
	}
	outs, err := cli.NewOutputs(cmd, o.json)
	if err != nil {
		return err
	}
	opts := did.DefaultOptions()
	opts.Window = did.Window{Pre: o.pre, Post: o.post}
	opts.Draws, opts.Seed, opts.Inference = o.draws, o.seed, o.inference
	f, err := os.Open(o.panel)
	if err != nil {
		return fmt.Errorf("panel: %w", err)
	}
	defer f.Close()
	if err := o.exportDefaults(cmd, f); err != nil {
		return err
	}
	if len(o.outcomes) == 0 {
		return cli.Usagef("name at least one --outcome column (%s is not a panel export of loadwake, which names them itself)", o.panel)
	}
	p, err := panel.ReadCSV(f, o.panel, panel.Columns{Unit: o.unit, Time: o.time, FirstTreated: o.firstTreated,
		Outcomes: o.outcomes, Cluster: o.cluster, Weight: o.weight, Covariates: o.covariates})
	if err != nil {
		return err
	}
	done := cli.NewProgress(cmd, g).Step("estimate " + filepath.Base(o.panel))
	es, err := did.Estimate(cmd.Context(), p, opts)
	done()
	if err != nil {
		return fmt.Errorf("%s: %w", o.panel, err)
	}
	printEstimates(outs.Text, es)
	return outs.Write(o.json, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(es)
	})
}

// exportDefaults reads the panel file's header and, when it is loadwake's own
// export (panel.WriteCSV), takes what the flags leave open from it: the
// matching weights, clusters and covariates of the export's columns, and every
// outcome column. So `estimate --panel panel.csv` on an audit's export
// reproduces the audit's estimates with no further flags. f is rewound for
// the full read.
func (o *estimateOptions) exportDefaults(cmd *cobra.Command, f *os.File) error {
	header, err := csv.NewReader(f).Read()
	if _, serr := f.Seek(0, io.SeekStart); serr != nil {
		return fmt.Errorf("panel: %w", serr)
	}
	if err != nil {
		return nil // panel.ReadCSV reports what is wrong with the file
	}
	cols, ok := panel.ExportDefaults(header)
	if !ok {
		return nil
	}
	fl := cmd.Flags()
	if !fl.Changed("weight") {
		o.weight = cols.Weight
	}
	if !fl.Changed("cluster") {
		o.cluster = cols.Cluster
	}
	if !fl.Changed("outcome") {
		o.outcomes = cols.Outcomes
	}
	if !fl.Changed("covariate") {
		o.covariates = cols.Covariates
	}
	return nil
}

func printEstimates(w interface{ Write([]byte) (int, error) }, es *did.Estimates) {
	tw := tabwriter.NewWriter(w, 2, 4, 2, ' ', 0)
	fmt.Fprintln(tw, "OUTCOME\tESTIMATOR\tATT\tRELATIVE\t95% INTERVAL\tP\tPRE-TREND P\tTREATED/CONTROL\tMETHOD")
	for _, e := range es.Effects {
		rel, ci := "-", fmt.Sprintf("[%.3g, %.3g]", e.CI95[0], e.CI95[1])
		if e.RelativeEffect != nil {
			rel = fmt.Sprintf("%+.1f%%", 100**e.RelativeEffect)
			ci = fmt.Sprintf("[%+.1f%%, %+.1f%%]", 100*e.CI95[0], 100*e.CI95[1])
		}
		pre := "-"
		if e.PreTrendP != nil {
			pre = fmt.Sprintf("%.3g", *e.PreTrendP)
		}
		fmt.Fprintf(tw, "%s\t%s\t%.4g\t%s\t%s\t%.3g\t%s\t%d/%d\t%s\n", e.Layer, e.Estimator, e.ATT, rel, ci, e.PValue, pre,
			e.TreatedUnits, e.ControlUnits, e.Method)
	}
	tw.Flush()
	for _, p := range es.Placebo {
		fmt.Fprintf(w, "placebo %s, starts %d months early: att %.4g [%.3g, %.3g], p %.3g\n", p.Layer, p.ShiftMonths, p.ATT, p.CI95[0], p.CI95[1], p.PValue)
	}
	if len(es.Warnings) > 0 {
		fmt.Fprintln(w, "\nwarnings:")
		for _, s := range es.Warnings {
			fmt.Fprintln(w, "  - "+s)
		}
	}
	if len(es.Notes) > 0 {
		fmt.Fprintln(w, "\nnotes (robustness checks, for information):")
		for _, s := range es.Notes {
			fmt.Fprintln(w, "  - "+s)
		}
	}
	fmt.Fprintln(w, "\n"+strings.Join(es.Cautions, "\n"))
}
