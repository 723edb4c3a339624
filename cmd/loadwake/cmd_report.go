package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// reportOptions holds the flags of `loadwake report`.
type reportOptions struct {
	study       cli.StudyFlags
	out         string
	est         cli.EstimatorFlags
	noChecklist bool
	by          []string // --by traits
}

func newReportCommand(g *cli.Globals) *cobra.Command {
	var o reportOptions
	cmd := &cobra.Command{
		Use:   "report --units SPEC [--import ID] --out DIR",
		Short: "Write an import's audit and checklist as files reviewers can read and post",
		Long: `report runs the audit of one import (see loadwake audit) and its neglected-tag
checklist (see loadwake checklist) and writes into DIR:

  report.md       plain Markdown to paste into a wiki page or a mail
  report.html     one self-contained page with the charts (opens offline,
                  loads nothing from the network)
  report.json     the audit JSON contract (as loadwake audit --json)
  units.geojson   every unit with its role, intensity, first month, weight
                  and the import's effect per layer
  panel.csv       the study panel (as loadwake panel)
  checklist.json  the checklist

The report explains each figure in plain words, lists warnings first and ends
with the cautions: the figures are evidence for the community's review, not a
verdict; imports follow the community's import guidelines and local review.`,
		Example: `  loadwake report --units districts.geojson --out review
  loadwake report --units tiles:14 --import imp-6143 --out review`,
		Args:        cli.NoArgs,
		Annotations: map[string]string{cli.AnnInterrupted: cli.InterruptedReadOnly},
		RunE:        func(cmd *cobra.Command, _ []string) error { return runReport(cmd, g, &o) },
	}
	o.study.AddFlags(cmd, g)
	o.study.AddTreatmentFlags(cmd)
	f := cmd.Flags()
	cli.AddOutFlag(f, &o.out, "the report (required)")
	cli.AddEstimatorFlags(f, &o.est)
	f.BoolVar(&o.noChecklist, "no-checklist", false, "leave the neglected-tag checklist out")
	cli.AddByFlag(cmd, &o.by)
	return cmd
}

func runReport(cmd *cobra.Command, g *cli.Globals, o *reportOptions) error {
	if o.out == "" {
		return cli.Usagef("--out is required: the folder to write the report into")
	}
	if err := o.est.Validate(&o.study, cmd.Flags()); err != nil {
		return err
	}
	ctx := cmd.Context()
	in, err := o.study.Open(cmd, g)
	if err != nil {
		return err
	}
	defer in.Store.Close()
	rep, err := cli.RunStudyAudit(cmd, g, in, &o.study, &o.est)
	if err != nil {
		return err
	}
	if err := cli.RunSplits(cmd, rep, o.by, &o.study, &o.est, cmd.OutOrStdout()); err != nil {
		return err
	}
	var cl *checklist.Checklist
	if !o.noChecklist && in.Assignment == nil { // the checklist is about an import's features
		done := cli.NewProgress(cmd, g).Step("checklist " + in.Episode.ID)
		cl, err = audit.ChecklistOf(ctx, in.Store, in.Rules, in.Episode, in.All, in.Units, o.study.StudyOptions(), checklist.Options{})
		done()
		if err != nil {
			return fmt.Errorf("checklist: %w", err)
		}
	}
	out := cmd.OutOrStdout()
	if rep.IsImport() {
		fmt.Fprintf(out, "import %s: %d import areas, %d matched comparison areas\n", rep.Import.ID, rep.Units.Treated, rep.Units.Controls)
	} else {
		fmt.Fprintf(out, "event %s: %d treated areas, %d matched comparison areas (no neglected-tag checklist: it is about an import's features)\n", rep.Event.Name, rep.Units.Treated, rep.Units.Controls)
	}
	for _, w := range rep.Warnings {
		fmt.Fprintln(out, "warning:", w)
	}
	if err := cli.WriteReports(out, o.out, cli.ReportInput(rep, in.Units, cl, nil)); err != nil {
		return err
	}
	fmt.Fprintln(out, "open", cli.ReportPath(o.out, report.FileHTML))
	return nil
}
