package main

import (
	"errors"
	"fmt"
	"io"
	"strings"
	"time"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/planrun"
	"github.com/spf13/cobra"
)

// simulateOptions holds the flags of `loadwake simulate`.
type simulateOptions struct {
	out       string
	force     bool
	start     string // first study month, YYYY-MM
	null      bool
	plan      string // plan.json whose waves the import follows
	effectSet bool   // set by PreRunE when an --effect-* flag was given
	cfg       sim.Config
}

func newSimulateCommand(_ *cli.Globals) *cobra.Command {
	o := simulateOptions{cfg: sim.DefaultConfig()}
	o.start = o.cfg.Start.Format("2006-01")
	c := &o.cfg
	cmd := &cobra.Command{
		Use:   "simulate --out DIR",
		Short: "Write an invented edit history with planted import effects, for checks and power analysis",
		Long: `simulate writes an invented OpenStreetMap history of a grid of districts on a
made-up island region (Quorvesk Isle; its coordinates lie in open water) into
DIR: history.osh.gz (full-history OSM XML), changesets.osm.gz (changeset
metadata), districts.geojson (the district polygons) and truth.json (what was
planted and the generator's own event counts per layer).

Organic activity is Poisson-gamma per district with a shared calendar trend
and seasonality; import accounts load buildings and points of interest into
--treated districts in --cohorts staggered waves, favouring busy districts.
After a district's import, its organic edits in each layer are multiplied by
the --effect-* factors (1 means no effect; --null sets all four to 1).

Load the files with "loadwake ingest", run the estimators, and compare their
answers with truth.json; vary --treated, --months and the effects to see how
large an effect a design would detect.

--plan FILE rehearses the evaluation of a rollout: the import follows the
waves of a plan made by "loadwake plan --units WORLD/districts.geojson" on a
world of the same seed and grid (its history is that world's up to the first
wave), and the world runs to the plan's evaluation month unless --months is
given; "loadwake audit --plan FILE" then evaluates it. The data are invented: never upload
them to OpenStreetMap.`,
		Example: `  loadwake simulate --out world
  loadwake simulate --out world --seed 7 --treated 24 --cohorts 3 --effect-attribute 0.8 --dynamic
  loadwake simulate --out null-world --null --diverging-pretrend --force
  loadwake simulate --out rehearsal --plan plan/plan.json --effect-attribute 0.7`,
		Args: func(cmd *cobra.Command, args []string) error {
			if len(args) > 0 {
				return cli.Usagef("%s takes no arguments, got %q", cmd.CommandPath(), args[0])
			}
			return nil
		},
		Annotations: map[string]string{cli.AnnInterrupted: "the files in the folder may be incomplete; rerun the same command with --force"},
		PreRunE: func(cmd *cobra.Command, _ []string) error {
			for _, name := range []string{"effect-geometry", "effect-attribute", "effect-new-feature", "effect-deletion"} {
				o.effectSet = o.effectSet || cmd.Flags().Changed(name)
			}
			return nil
		},
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runSimulate(cmd, &o)
		},
	}
	f := cmd.Flags()
	f.StringVar(&o.out, "out", "", "folder to write into (required; must be empty or missing unless --force)")
	f.BoolVar(&o.force, "force", false, "overwrite the output files in a non-empty folder")
	f.Uint64Var(&c.Seed, "seed", c.Seed, "random seed; the same seed and flags give byte-identical files")
	f.IntVar(&c.Cols, "cols", c.Cols, "districts from west to east")
	f.IntVar(&c.Rows, "rows", c.Rows, "districts from south to north")
	f.IntVar(&c.Months, "months", c.Months, "study months (a baseline month of initial mapping comes before them)")
	f.StringVar(&o.start, "start", o.start, "first study month, YYYY-MM")
	f.Float64Var(&c.MeanActivity, "activity", c.MeanActivity, "mean organic edits per district-month (μ of the Poisson-gamma model)")
	f.Float64Var(&c.Dispersion, "dispersion", c.Dispersion, "Gamma shape k of district activity; smaller is more uneven (Var = μ + μ²/k)")
	f.IntVar(&c.Treated, "treated", c.Treated, "districts that receive an import (0 for a world without one)")
	f.IntVar(&c.Waves, "cohorts", c.Waves, "staggered waves the treated districts are split into")
	f.Float64Var(&c.Effects.Geometry, "effect-geometry", c.Effects.Geometry, "multiplier on organic geometry edits after an import")
	f.Float64Var(&c.Effects.Attribute, "effect-attribute", c.Effects.Attribute, "multiplier on organic attribute edits after an import")
	f.Float64Var(&c.Effects.NewFeature, "effect-new-feature", c.Effects.NewFeature, "multiplier on organic new features after an import")
	f.Float64Var(&c.Effects.Deletion, "effect-deletion", c.Effects.Deletion, "multiplier on organic deletions after an import")
	f.BoolVar(&o.null, "null", false, "no effects: all four multipliers 1 (not with --effect-*)")
	f.BoolVar(&c.Dynamic, "dynamic", false, "effects grow linearly over --ramp months of event time instead of starting at once")
	f.IntVar(&c.RampMonths, "ramp", c.RampMonths, "months over which --dynamic effects reach their full size")
	f.StringVar(&o.plan, "plan", "", "`FILE` of a plan (plan.json) over this world's districts: the import follows its waves (not with --treated, --cohorts)")
	f.BoolVar(&c.TrendSelection, "diverging-pretrend", false, "treated districts grow faster all along, so parallel trends fail")
	f.Float64Var(&c.Scale, "scale", c.Scale, "multiplies activity, baseline stock and import sizes (benchmark worlds)")
	return cmd
}

func runSimulate(cmd *cobra.Command, o *simulateOptions) error {
	if o.out == "" {
		return cli.Usagef("simulate needs --out DIR")
	}
	if o.null && o.effectSet {
		return cli.Usagef("--null sets every effect to 1; leave out the --effect-* flags")
	}
	if o.null {
		o.cfg.Effects = sim.Effects{Geometry: 1, Attribute: 1, NewFeature: 1, Deletion: 1}
	}
	if err := o.design(cmd); err != nil {
		return err
	}
	tr, err := sim.Generate(cmd.Context(), o.cfg, o.out, o.force)
	switch {
	case errors.Is(err, sim.ErrConfig):
		return cli.Usagef("%s", strings.TrimPrefix(err.Error(), "sim: invalid configuration: "))
	case err != nil:
		return err
	}
	printSimulateSummary(cmd.OutOrStdout(), o.out, tr)
	return nil
}

// design sets the configuration's start month and its treated districts and
// waves: from --plan, or the defaults fitted to the grid and the months.
func (o *simulateOptions) design(cmd *cobra.Command) error {
	start, err := time.Parse("2006-01", o.start)
	if err != nil {
		return cli.Usagef("--start %q is not a month like 2019-01", o.start)
	}
	o.cfg.Start = start.UTC()
	switch f := cmd.Flags(); {
	case o.plan != "" && (f.Changed("treated") || f.Changed("cohorts")):
		return cli.Usagef("--plan gives the treated districts and their months: leave out --treated and --cohorts")
	case o.plan != "":
		if o.cfg, err = planrun.World(cmd.OutOrStdout(), o.plan, o.cfg, f.Changed("months")); err != nil {
			return err
		}
	case o.cfg.Treated == 0 && !f.Changed("cohorts"):
		o.cfg.Waves = 0
	case o.cfg.Treated > 0 && !f.Changed("cohorts"):
		// Fewer default cohorts when the design has too few districts or months for them.
		o.cfg.Waves = max(1, min(o.cfg.Waves, o.cfg.Treated, o.cfg.Months-1))
	}
	return nil
}

func printSimulateSummary(w io.Writer, dir string, tr *sim.Truth) {
	c, ta := tr.Config, tr.Tallies
	fmt.Fprintf(w, "%s (invented region): %d×%d districts, %s to %s, seed %d\n",
		tr.Region.Name, c.Cols, c.Rows, tr.Months[0], tr.Months[len(tr.Months)-1], c.Seed)
	fmt.Fprintf(w, "  versions    %d nodes, %d ways (%d import)\n", ta.NodeVersions, ta.WayVersions, ta.ImportVersions)
	fmt.Fprintf(w, "  changesets  %d (%d import)\n", ta.Changesets, len(tr.ImportChangesets))
	fmt.Fprintf(w, "  organic     geometry %d, attribute %d, new_feature %d, deletion %d, bookkeeping %d\n",
		ta.Organic.Geometry, ta.Organic.Attribute, ta.Organic.NewFeature, ta.Organic.Deletion, ta.Organic.Bookkeeping)
	if len(tr.Cohorts) == 0 {
		fmt.Fprintln(w, "  import      none")
	}
	for _, co := range tr.Cohorts {
		fmt.Fprintf(w, "  cohort %d    starts %s, %d districts\n", co.Wave, co.Start, len(co.Districts))
	}
	if len(tr.Cohorts) > 0 {
		e := tr.Effects
		kind := "from the import month on"
		if tr.Dynamic {
			kind = fmt.Sprintf("growing over %d months", tr.RampMonths)
		}
		fmt.Fprintf(w, "  effects     geometry ×%g, attribute ×%g, new_feature ×%g, deletion ×%g, %s\n",
			e.Geometry, e.Attribute, e.NewFeature, e.Deletion, kind)
		if tr.TrendSelection {
			fmt.Fprintln(w, "  pre-trend   treated districts diverge (parallel trends fail by design)")
		}
	}
	fmt.Fprintf(w, "wrote %s, %s, %s, %s in %s\n", sim.HistoryFile, sim.ChangesetsFile, sim.DistrictsFile, sim.TruthFile, dir)
	fmt.Fprintln(w, "The data are invented: never upload them to OpenStreetMap.")
}
