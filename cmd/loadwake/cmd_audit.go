package main

import (
	"fmt"
	"io"
	"os"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
)

// auditOptions holds the flags of `loadwake audit`.
type auditOptions struct {
	study     studyFlags
	json      string // write the audit JSON here
	report    string // write the report folder here
	md        string // write the report's Markdown here
	draws     int
	seed      uint64
	inference string
	pre       int // event window months before treatment for the estimators
}

func newAuditCommand(g *globalOptions) *cobra.Command {
	var o auditOptions
	cmd := &cobra.Command{
		Use:   "audit --units SPEC [--import ID] [--json FILE]",
		Short: "Estimate how follow-on editing changed after an import, per layer",
		Long: `audit builds the import's panel with matched control units (see loadwake panel)
and estimates, for each layer, attribute key family and contributor group, how
follow-on activity in the import's units changed against the matched untouched
units:

  cs-att       Callaway & Sant'Anna group-time ATT, never-treated matched controls
  ppml-twfe    Poisson pseudo-maximum-likelihood with unit and month fixed
               effects, each cohort stacked with clean controls
  twfe-linear  linear event study with leads and lags (for the chart)
  did-2x2      the classic before/after, treated/control comparison

Each figure comes with its 95% interval, the inference method (cluster-robust by
unit, or a wild cluster bootstrap when treated units are few), a joint test of
the pre-import leads, and the counts of treated and control units. The relative
effect is the change as a share of what the import's units would have seen
without it. The JSON contract is described in the README ("The audit JSON").

The figures are evidence for the community's review, not a verdict.`,
		Args: noArgs,
		RunE: func(cmd *cobra.Command, _ []string) error { return runAudit(cmd, g, &o) },
	}
	o.study.addFlags(cmd.Flags())
	f := cmd.Flags()
	f.StringVar(&o.json, "json", "", "write the audit as JSON to this file")
	f.StringVar(&o.report, "report", "", "write the report folder (Markdown, HTML with charts, JSON, GeoJSON, panel CSV) here")
	f.StringVar(&o.md, "md", "", "write the report's Markdown to this file")
	f.IntVar(&o.draws, "draws", 999, "bootstrap draws")
	f.Uint64Var(&o.seed, "seed", 1, "seed of the bootstrap draws")
	f.StringVar(&o.inference, "inference", "auto", "auto (bootstrap when treated units are few), analytic or bootstrap")
	f.IntVar(&o.pre, "pre", 12, "months before each unit's import used by the estimators (at most --before)")
	return cmd
}

func runAudit(cmd *cobra.Command, g *globalOptions, o *auditOptions) error {
	if o.draws < 99 {
		return usagef("--draws must be at least 99")
	}
	in, err := o.study.open(cmd.Context(), g)
	if err != nil {
		return err
	}
	defer in.store.Close()
	eo := did.DefaultOptions()
	eo.Draws, eo.Seed, eo.Inference = o.draws, o.seed, o.inference
	eo.Window = did.Window{Pre: min(o.pre, o.study.before), Post: o.study.after}
	rep, err := audit.Run(cmd.Context(), in.store, in.episode, in.all, in.units,
		audit.Options{Study: o.study.studyOptions(), Estimate: eo, UnitSpec: o.study.units,
			Generator: generator(cmd.Context(), in.store, false)})
	if err != nil {
		return err
	}
	out := cmd.OutOrStdout()
	fmt.Fprintf(out, "import %s (%s), panel %s to %s\n", rep.Import.ID, joinOr(rep.Import.Accounts, "no account"), rep.Window[0], rep.Window[1])
	if err := audit.WriteUnitSummary(out, rep.Study); err != nil {
		return err
	}
	for _, w := range rep.Warnings {
		fmt.Fprintln(out, "warning:", w)
	}
	fmt.Fprintln(out)
	if err := rep.WriteEffects(out); err != nil {
		return err
	}
	fmt.Fprintln(out)
	for _, c := range rep.Cautions {
		fmt.Fprintln(out, "caution:", c)
	}
	if o.json != "" {
		if err := writeFile(o.json, rep.WriteJSON); err != nil {
			return err
		}
		fmt.Fprintln(out, "wrote", o.json)
	}
	if o.md != "" {
		if err := writeReportMarkdown(o.md, reportInput(rep, in.units, nil, nil)); err != nil {
			return err
		}
		fmt.Fprintln(out, "wrote", o.md)
	}
	if o.report != "" {
		if err := writeReports(out, o.report, reportInput(rep, in.units, nil, nil)); err != nil {
			return err
		}
	}
	return nil
}

// writeFile creates path and lets write fill it.
func writeFile(path string, write func(w io.Writer) error) error {
	f, err := os.Create(path)
	if err != nil {
		return err
	}
	if err := write(f); err != nil {
		f.Close()
		return fmt.Errorf("write %s: %w", path, err)
	}
	return f.Close()
}

func joinOr(s []string, none string) string {
	if len(s) == 0 {
		return none
	}
	out := s[0]
	for _, x := range s[1:] {
		out += ", " + x
	}
	return out
}
