package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/report"
)

// reportOptions holds the flags of `loadwake report`.
type reportOptions struct {
	study       studyFlags
	out         string
	est         estimatorFlags
	noChecklist bool
	by          []string // --by traits
}

func newReportCommand(g *globalOptions) *cobra.Command {
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
		Args:        noArgs,
		Annotations: map[string]string{annInterrupted: interruptedReadOnly},
		RunE:        func(cmd *cobra.Command, _ []string) error { return runReport(cmd, g, &o) },
	}
	o.study.addFlags(cmd, g)
	o.study.addTreatmentFlags(cmd)
	f := cmd.Flags()
	addOutFlag(f, &o.out, "the report (required)")
	addEstimatorFlags(f, &o.est)
	f.BoolVar(&o.noChecklist, "no-checklist", false, "leave the neglected-tag checklist out")
	addByFlag(cmd, &o.by)
	return cmd
}

func runReport(cmd *cobra.Command, g *globalOptions, o *reportOptions) error {
	if o.out == "" {
		return usagef("--out is required: the folder to write the report into")
	}
	if err := o.est.validate(&o.study, cmd.Flags()); err != nil {
		return err
	}
	ctx := cmd.Context()
	in, err := o.study.open(cmd, g)
	if err != nil {
		return err
	}
	defer in.store.Close()
	rep, err := runStudyAudit(cmd, g, in, &o.study, &o.est)
	if err != nil {
		return err
	}
	if err := runSplits(cmd, rep, o.by, &o.study, &o.est, cmd.OutOrStdout()); err != nil {
		return err
	}
	var cl *checklist.Checklist
	if !o.noChecklist && in.assignment == nil { // the checklist is about an import's features
		done := newProgress(cmd, g).step("checklist " + in.episode.ID)
		cl, err = audit.ChecklistOf(ctx, in.store, in.rules, in.episode, in.all, in.units, o.study.studyOptions(), checklist.Options{})
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
	if err := writeReports(out, o.out, reportInput(rep, in.units, cl, nil)); err != nil {
		return err
	}
	fmt.Fprintln(out, "open", reportPath(o.out, report.FileHTML))
	return nil
}
