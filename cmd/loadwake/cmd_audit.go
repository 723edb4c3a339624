package main

import (
	"fmt"
	"io"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/planrun"
)

// auditOptions holds the flags of `loadwake audit`.
type auditOptions struct {
	study cli.StudyFlags
	json  string // write the audit JSON here
	out   string // write the report folder here
	md    string // write the report's Markdown here
	est   cli.EstimatorFlags
	by    []string // --by traits
	plan  planrun.Audit
}

func newAuditCommand(g *cli.Globals) *cobra.Command {
	var o auditOptions
	cmd := &cobra.Command{
		Use:   "audit --units SPEC [--import ID] [--json FILE] [--md FILE] [--out DIR]",
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
		Example: `  loadwake audit --units tiles:14 --import imp-6143 --json audit.json --out review
  loadwake audit --units districts.geojson --json - | jq .effects`,
		Args:              cli.NoArgs,
		Annotations:       map[string]string{cli.AnnInterrupted: cli.InterruptedReadOnly},
		ValidArgsFunction: cobra.NoFileCompletions,
		RunE:              func(cmd *cobra.Command, _ []string) error { return runAudit(cmd, g, &o) },
	}
	o.study.AddFlags(cmd, g)
	o.study.AddTreatmentFlags(cmd)
	f := cmd.Flags()
	cli.AddFileFlag(f, &o.json, "json", "the audit as JSON")
	cli.AddFileFlag(f, &o.md, "md", "the report's Markdown")
	cli.AddOutFlag(f, &o.out, "the report (Markdown, HTML with charts, JSON, GeoJSON, panel CSV)")
	cli.AddEstimatorFlags(f, &o.est)
	cli.AddByFlag(cmd, &o.by)
	o.plan.AddFlags(f)
	return cmd
}

func runAudit(cmd *cobra.Command, g *cli.Globals, o *auditOptions) error {
	cleanup, err := o.plan.Prepare(cmd, &o.study)
	if err != nil {
		return err
	}
	defer cleanup()
	if err := o.est.Validate(&o.study, cmd.Flags()); err != nil {
		return err
	}
	outs, err := cli.NewOutputs(cmd, o.json, o.md)
	if err != nil {
		return err
	}
	in, err := o.study.Open(cmd, g)
	if err != nil {
		return err
	}
	defer in.Store.Close()
	rep, err := cli.RunStudyAudit(cmd, g, in, &o.study, &o.est)
	if err != nil {
		return err
	}
	out := outs.Text
	if err := cli.RunSplits(cmd, rep, o.by, &o.study, &o.est, out); err != nil {
		return err
	}
	if err := printAudit(out, rep); err != nil {
		return err
	}
	md := func(w io.Writer) error { return report.WriteMarkdown(w, cli.ReportInput(rep, in.Units, nil, nil)) }
	if err := outs.Write(o.json, rep.WriteJSON); err != nil {
		return err
	}
	if err := outs.Write(o.md, md); err != nil {
		return err
	}
	if o.out != "" {
		if err := cli.WriteReports(out, o.out, cli.ReportInput(rep, in.Units, nil, nil)); err != nil {
			return err
		}
	}
	return o.plan.Finish(cmd, in, rep, &o.est, &o.study, out, o.out)
}

// printAudit prints the audit's summary: what was studied, the units, the
// warnings, the effects and the cautions.
func printAudit(out io.Writer, rep *audit.Report) error {
	if rep.IsImport() {
		fmt.Fprintf(out, "import %s (%s), panel %s to %s\n", rep.Import.ID, cli.JoinOr(rep.Import.Accounts, "no account"), rep.Window[0], rep.Window[1])
	} else {
		fmt.Fprintf(out, "event %s (%s), panel %s to %s\n", rep.Event.Name, rep.Event.Source, rep.Window[0], rep.Window[1])
	}
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
	return nil
}
