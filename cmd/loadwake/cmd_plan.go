package main

import (
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/power"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/rollout"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// planOptions holds the flags of `loadwake plan`.
type planOptions struct {
	rules, units, unitID, blockBy string
	waves, between, after, before int
	history, worlds, draws        int
	start, outcome                string
	seed                          uint64
	pause                         float64
	noPower                       bool
	json, csv, geojson, md        string
	out                           string
}

func newPlanCommand(g *cli.Globals) *cobra.Command {
	o := planOptions{}
	cmd := &cobra.Command{
		Use:   "plan PROPOSAL --units SPEC [--waves 3] [--months-between 3] [--seed S] [--out DIR]",
		Short: "Plan a proposed import as a randomized staggered rollout, with its power and pre-registration",
		Long: `plan reads a proposed import (OSM XML, OsmChange or GeoJSON, as assess does),
places its features in the spatial units and deals the units to --waves waves
at random, stratified by their past activity in the store (and blocked by a
units-file property with --block-by). Waves start --months-between months
apart; the last wave is held back as the comparison until the evaluation,
--window-after months after the last treated wave starts.

It reports the balance of the waves, simulates the evaluation with the
audit's headline estimator and inference on the units' own past activity
(level, seasonality, trend, over-dispersion) to give the minimum detectable
effect per layer at 80% power for the plan and for alternatives (more waves,
longer follow-up, more units), and sets O'Brien-Fleming-type boundaries for
interim looks between waves.

--out DIR writes plan.json, plan.csv, plan.geojson, one OsmChange file per
wave under waves/ (each under the OSM API 0.6 limit of 10,000 changes per
changeset; OSM API v0.6 capabilities), power charts (SVG and PNG) and the
pre-registration (preregistration.md and preregistration.wiki). The same seed
gives the same plan. A plan is for the community's review: community
approval, the import guidelines and local review come first.`,
		Example: `  loadwake plan proposal.geojson --units tiles:17 --waves 3 --months-between 3 --seed 2026 --out plan
  loadwake plan proposal.osc --units districts.geojson --block-by region --waves 4 --json plan.json`,
		Args:        cli.ExactArgs(1),
		Annotations: map[string]string{cli.AnnInterrupted: cli.InterruptedReadOnly},
		RunE:        func(cmd *cobra.Command, args []string) error { return runPlan(cmd, g, &o, args[0]) },
	}
	f := cmd.Flags()
	f.StringVar(&o.rules, "rules", "", "rule `FILE` (default: the built-in rules; see loadwake rules show)")
	f.StringVar(&o.units, "units", "", "spatial units `SPEC`: tiles:Z or a GeoJSON file of polygons (required)")
	f.StringVar(&o.unitID, "unit-id", "id", "GeoJSON property `PROP` holding each unit's id")
	f.StringVar(&o.blockBy, "block-by", "", "units-file property `PROP` whose values block the randomization (waves drawn within each block)")
	f.IntVar(&o.waves, "waves", 3, "waves, the last held back as the comparison until the evaluation")
	f.IntVar(&o.between, "months-between", 3, "months between the starts of the waves")
	f.IntVar(&o.after, "window-after", 0, "months from the last treated wave's start to the evaluation (default --months-between)")
	f.IntVar(&o.before, "window-before", 12, "months before each wave the evaluation uses")
	f.IntVar(&o.history, "history", 24, "months of the store's history the units' activity is fitted on")
	f.StringVar(&o.start, "start", "", "month `YYYY-MM` of the first wave (default: the month after the store's history)")
	f.Uint64Var(&o.seed, "seed", 1, "seed of the random assignment: the same seed gives the same plan")
	f.StringVar(&o.outcome, "outcome", "attribute", "the pre-registered layer: geometry, attribute, new_feature or deletion")
	f.Float64Var(&o.pause, "pause", 20, "decision rule: pause the remaining waves when the outcome falls by more than this `PERCENT`")
	f.IntVar(&o.worlds, "worlds", 20, "simulated evaluations per design for the power (more: smaller Monte Carlo error, slower)")
	f.IntVar(&o.draws, "draws", 199, "bootstrap draws of each simulated evaluation (at least 99)")
	f.BoolVar(&o.noPower, "no-power", false, "do not simulate the power (fast; no minimum detectable effects)")
	cli.AddFileFlag(f, &o.json, "json", "the plan as JSON")
	cli.AddFileFlag(f, &o.csv, "csv", "the plan's units as CSV (unit, wave, start month)")
	cli.AddFileFlag(f, &o.geojson, "geojson", "the plan's units as GeoJSON")
	cli.AddFileFlag(f, &o.md, "md", "the pre-registration as Markdown")
	cli.AddOutFlag(f, &o.out, "the plan, the per-wave OsmChange files, the power charts and the pre-registration")
	return cmd
}

func (o *planOptions) validate() (time.Time, error) {
	switch {
	case o.units == "":
		return time.Time{}, cli.Usagef("--units is required: tiles:Z or a GeoJSON file of polygons")
	case o.waves < 2:
		return time.Time{}, cli.Usagef("--waves must be at least 2 (the last is the comparison)")
	case o.between < 1 || o.after < 0 || o.before < 2 || o.history < 2:
		return time.Time{}, cli.Usagef("--months-between must be at least 1, --window-before and --history at least 2, --window-after not negative")
	case o.worlds < 1:
		return time.Time{}, cli.Usagef("--worlds must be at least 1")
	case o.draws < 99:
		return time.Time{}, cli.Usagef("--draws must be at least 99")
	case !(o.pause > 0 && o.pause < 100):
		return time.Time{}, cli.Usagef("--pause must lie between 0 and 100 percent")
	}
	if o.start == "" {
		return time.Time{}, nil
	}
	t, err := time.Parse("2006-01", o.start)
	if err != nil {
		return time.Time{}, cli.Usagef("--start %q: want YYYY-MM", o.start)
	}
	return t, nil
}

func runPlan(cmd *cobra.Command, g *cli.Globals, o *planOptions, path string) error {
	start, err := o.validate()
	if err != nil {
		return err
	}
	outs, err := cli.NewOutputs(cmd, o.json, o.csv, o.geojson, o.md)
	if err != nil {
		return err
	}
	ctx, out := cmd.Context(), outs.Text
	r, err := cli.LoadRules(o.rules)
	if err != nil {
		return err
	}
	p, err := proposal.ReadFile(ctx, path, r, proposal.Options{})
	if err != nil {
		return err
	}
	st, err := cli.OpenStore(g)
	if err != nil {
		return err
	}
	defer st.Close()
	units, err := cli.StoreUnits(ctx, st, o.units, o.unitID, "name", p.Bound, time.Time{})
	if err != nil {
		return err
	}
	opts := rollout.Options{Waves: o.waves, MonthsBetween: o.between, FollowUp: o.after, Start: start, History: o.history,
		Before: o.before, Seed: o.seed, Outcome: o.outcome, Pause: o.pause / 100, SkipPower: o.noPower,
		Power: power.Options{Worlds: o.worlds, Draws: o.draws, Seed: o.seed}}
	if o.blockBy != "" {
		if opts.Blocks, err = rollout.ReadBlocks(o.units, o.unitID, o.blockBy); err != nil {
			return err
		}
	}
	eps, err := episode.Detect(ctx, st, r, episode.Options{})
	if err != nil {
		return err
	}
	for _, e := range eps {
		opts.Exclude = append(opts.Exclude, e.Changesets...)
	}
	done := cli.NewProgress(cmd, g).Step("plan " + filepath.Base(path) + ": assignment and power")
	pl, err := rollout.Make(ctx, st, p, units, o.units, opts)
	done()
	if err != nil {
		return err
	}
	return writePlan(out, outs, o, pl)
}

// writePlan writes the plan's files and prints its summary.
func writePlan(out io.Writer, outs *cli.Outputs, o *planOptions, pl *rollout.Plan) error {
	if o.out != "" {
		if err := os.MkdirAll(o.out, 0o755); err != nil {
			return fmt.Errorf("create output folder: %w", err)
		}
		paths, err := pl.WriteWaves(filepath.Join(o.out, "waves"))
		if err != nil {
			return err
		}
		if pl.Power != nil {
			charts, err := pl.Power.WriteCharts(filepath.Join(o.out, "charts"), pl.Outcome)
			if err != nil {
				return err
			}
			paths = append(paths, charts...)
		}
		for _, f := range []struct {
			name string
			fill func(w io.Writer) error
		}{{"plan.json", pl.WriteJSON}, {"plan.csv", pl.WriteCSV}, {"plan.geojson", pl.WriteGeoJSON}, {"treatment.csv", pl.WriteTreatmentCSV},
			{"preregistration.md", pl.WritePreregistration}, {"preregistration.wiki", pl.WritePreregistrationWiki}} {
			p := filepath.Join(o.out, f.name)
			if err := cli.WriteFile(p, f.fill); err != nil {
				return err
			}
			paths = append(paths, p)
		}
		fmt.Fprintf(out, "wrote %d files into %s\n", len(paths), o.out)
	}
	for _, f := range []struct {
		path string
		fill func(w io.Writer) error
	}{{o.json, pl.WriteJSON}, {o.csv, pl.WriteCSV}, {o.geojson, pl.WriteGeoJSON}, {o.md, pl.WritePreregistration}} {
		if err := outs.Write(f.path, f.fill); err != nil {
			return err
		}
	}
	return pl.WriteSummary(out)
}
