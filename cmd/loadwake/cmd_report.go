package main

import (
	"fmt"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/report"
)

// reportOptions holds the flags of `loadwake report`.
type reportOptions struct {
	study       studyFlags
	out         string
	draws       int
	seed        uint64
	inference   string
	pre         int
	noChecklist bool
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
		Args: noArgs,
		RunE: func(cmd *cobra.Command, _ []string) error { return runReport(cmd, g, &o) },
	}
	o.study.addFlags(cmd.Flags())
	f := cmd.Flags()
	f.StringVar(&o.out, "out", "", "folder to write the report into (required; created if missing)")
	f.IntVar(&o.draws, "draws", 999, "bootstrap draws")
	f.Uint64Var(&o.seed, "seed", 1, "seed of the bootstrap draws")
	f.StringVar(&o.inference, "inference", "auto", "auto (bootstrap when treated units are few), analytic or bootstrap")
	f.IntVar(&o.pre, "pre", 12, "months before each unit's import used by the estimators (at most --before)")
	f.BoolVar(&o.noChecklist, "no-checklist", false, "leave the neglected-tag checklist out")
	return cmd
}

func runReport(cmd *cobra.Command, g *globalOptions, o *reportOptions) error {
	if o.out == "" {
		return usagef("--out is required: the folder to write the report into")
	}
	if o.draws < 99 {
		return usagef("--draws must be at least 99")
	}
	ctx := cmd.Context()
	in, err := o.study.open(ctx, g)
	if err != nil {
		return err
	}
	defer in.store.Close()
	eo := did.DefaultOptions()
	eo.Draws, eo.Seed, eo.Inference = o.draws, o.seed, o.inference
	eo.Window = did.Window{Pre: min(o.pre, o.study.before), Post: o.study.after}
	rep, err := audit.Run(ctx, in.store, in.episode, in.all, in.units,
		audit.Options{Study: o.study.studyOptions(), Estimate: eo, UnitSpec: o.study.units,
			Generator: generator(ctx, in.store, false)})
	if err != nil {
		return err
	}
	var cl *checklist.Checklist
	if !o.noChecklist {
		cl, err = audit.ChecklistOf(ctx, in.store, in.rules, in.episode, in.all, in.units, o.study.studyOptions(), checklist.Options{})
		if err != nil {
			return fmt.Errorf("checklist: %w", err)
		}
	}
	out := cmd.OutOrStdout()
	fmt.Fprintf(out, "import %s: %d import areas, %d matched comparison areas\n", rep.Import.ID, rep.Units.Treated, rep.Units.Controls)
	for _, w := range rep.Warnings {
		fmt.Fprintln(out, "warning:", w)
	}
	if err := writeReports(out, o.out, reportInput(rep, in.units, cl, nil)); err != nil {
		return err
	}
	fmt.Fprintln(out, "open", reportPath(o.out, report.FileHTML))
	return nil
}
