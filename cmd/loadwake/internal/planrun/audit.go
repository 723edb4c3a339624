package planrun

import (
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	"github.com/paulmach/osm"
	"github.com/spf13/cobra"
	"github.com/spf13/pflag"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/rollout"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// EvalFile is the file --plan writes into --out beside the report.
const EvalFile = "plan-evaluation.json"

// Audit is the --plan part of audit: the plan's waves as the treatment,
// the randomization-inference p-value and the deviations from the plan.
type Audit struct {
	path  string
	draws int
	plan  *rollout.Plan
}

// AddFlags adds --plan and --plan-draws to audit's flags.
func (pa *Audit) AddFlags(f *pflag.FlagSet) {
	f.StringVar(&pa.path, "plan", "", "`FILE` of a plan written by loadwake plan (plan.json): its waves are the treatment, the held-back wave the comparison")
	f.IntVar(&pa.draws, "plan-draws", 199, "re-drawn assignments of the plan's randomization test (with --plan)")
}

// Prepare reads the plan and makes its waves the study's treatment (a
// treatment file in a temporary folder); --units defaults to the plan's
// plan.geojson beside it, and the panel to --window-before months before the
// first wave up to the month before the evaluation, and --k to 1. It
// returns a cleanup.
func (pa *Audit) Prepare(cmd *cobra.Command, s *cli.StudyFlags) (func(), error) {
	if pa.path == "" {
		return func() {}, nil
	}
	if s.Treatment != "" || s.ImportID != "" || s.Changesets != "" || s.Account != "" {
		return nil, cli.Usagef("--plan gives the treatment itself: leave out --treatment, --import, --changesets and --account")
	}
	if pa.draws < 19 {
		return nil, cli.Usagef("--plan-draws must be at least 19")
	}
	pl, err := rollout.ReadPlan(pa.path)
	if err != nil {
		return nil, err
	}
	pa.plan = pl
	planDefaults(cmd, s, pa.path, pl)
	dir, err := os.MkdirTemp("", "loadwake-plan-")
	if err != nil {
		return nil, fmt.Errorf("plan treatment: %w", err)
	}
	s.Treatment = filepath.Join(dir, "treatment.csv")
	if s.EventName == "" {
		s.EventName = "planned rollout of " + pl.Proposal
	}
	if err := cli.WriteFile(s.Treatment, pl.WriteTreatmentCSV); err != nil {
		os.RemoveAll(dir)
		return nil, err
	}
	return func() { os.RemoveAll(dir) }, nil
}

// planDefaults sets the study flags the plan decides unless given: --units
// (plan.geojson beside the plan), --after (up to the month before the
// evaluation), --before (the plan's own) and --k (1: the comparison wave is
// few units drawn at random, so each treated unit is matched with one).
func planDefaults(cmd *cobra.Command, s *cli.StudyFlags, path string, pl *rollout.Plan) {
	f := cmd.Flags()
	if s.Units == "" {
		s.Units = filepath.Join(filepath.Dir(path), "plan.geojson")
	}
	start, _ := time.Parse("2006-01", pl.Start)
	eval, _ := time.Parse("2006-01", pl.Evaluation)
	last := start
	for _, t := range pl.Treatment() {
		if t.After(last) {
			last = t
		}
	}
	if !f.Changed("after") {
		s.After = max(1, (eval.Year()-last.Year())*12+int(eval.Month())-int(last.Month())-1)
	}
	if !f.Changed("before") {
		s.Before = max(pl.Before, 2)
	}
	if !f.Changed("k") {
		s.K = 1
	}
}

// Evaluation is what --plan adds to an audit.
type Evaluation struct {
	Plan          string              `json:"plan"`
	Seed          uint64              `json:"seed"`
	Randomization *rollout.RIResult   `json:"randomization"`
	Deviations    []rollout.Deviation `json:"deviations"`
	Imports       []string            `json:"imports_checked"`
	Note          string              `json:"note"`
}

// Finish adds the randomization test and the deviations, prints them and,
// with --out, writes plan-evaluation.json.
func (pa *Audit) Finish(cmd *cobra.Command, in *cli.StudyInputs, rep *audit.Report, est *cli.EstimatorFlags, s *cli.StudyFlags, out io.Writer, outDir string) error {
	if pa.plan == nil {
		return nil
	}
	pl, ctx := pa.plan, cmd.Context()
	ev := Evaluation{Plan: pa.path, Seed: pl.Seed, Deviations: []rollout.Deviation{},
		Note: "The randomization p-value re-draws the waves with the plan's own procedure; it holds whatever the activity's distribution, as long as the units were loaded as planned (see the deviations)."}
	if rep.Study != nil && rep.Study.All != nil {
		ri, err := pl.RandomizationEffect(ctx, rep.Study.All, pl.Outcome, pa.draws, est.Options(s))
		if err != nil {
			return err
		}
		ev.Randomization = ri
		fmt.Fprintf(out, "plan: %s %+.1f%% (log ratio %.3f), randomization p = %.3f over %d re-drawn assignments (seed %d)\n",
			ri.Outcome, 100*ri.Relative, ri.Observed, ri.P, ri.Draws, pl.Seed)
	}
	// The rollout's uploads: the imports the store shows starting at or
	// after the plan's first month.
	var cs []osm.ChangesetID
	for _, e := range in.All {
		if e.FirstMonth >= pl.Start {
			ev.Imports = append(ev.Imports, e.ID)
			cs = append(cs, e.Changesets...)
		}
	}
	loaded, err := rollout.LoadedMonths(ctx, in.Store, cs, in.Units)
	if err != nil {
		return err
	}
	ev.Deviations = append(ev.Deviations, pl.Deviations(loaded)...)
	if len(ev.Imports) == 0 {
		fmt.Fprintln(out, "plan: no import in the store starts at or after the plan's first month; every treated unit counts as not loaded")
	}
	for _, d := range ev.Deviations {
		fmt.Fprintf(out, "plan deviation: unit %s (wave %d, planned %s): %s %s\n", d.Unit, d.Wave, d.Planned, d.Kind, d.Loaded)
	}
	if outDir == "" {
		return nil
	}
	return cli.WriteFile(filepath.Join(outDir, EvalFile), func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(ev)
	})
}
