package main

import (
	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/demo"
)

// demoOptions holds the flags of `loadwake demo`.
type demoOptions struct {
	out   string
	force bool
	seed  uint64
	grid  int     // districts per side (0: the simulator's default)
	scale float64 // activity and stock multiplier (0: the simulator's default)
	draws int
	// newcomerHR plants newcomers who keep to one district (sim.Retention)
	// with this hazard ratio of stopping after the import; 0 leaves them out.
	newcomerHR float64
}

func newDemoCommand(g *cli.Globals) *cobra.Command {
	o := demoOptions{out: "demo-out", seed: 1, draws: 199}
	cmd := &cobra.Command{
		Use:   "demo [--out DIR] [--force] [--seed N]",
		Short: "Run the whole job on an invented region and write the reports",
		Long: `demo simulates an invented island region (Quorvesk Isle, with made-up accounts
and agencies; its coordinates lie in open water) that received a staggered
building import, then does what a reviewer would: ingests the history into an
embedded store under DIR, classifies every edit, finds the imports, audits the
largest one over the districts, builds its neglected-tag checklist, assesses an
invented follow-up proposal in a few untouched districts, and writes the
reports into DIR/report/.

All data are invented: never upload them to OpenStreetMap.`,
		Example: `  loadwake demo
  loadwake demo --out /tmp/demo --force --seed 7`,
		Args:        cli.NoArgs,
		Annotations: map[string]string{cli.AnnInterrupted: "the demo stopped before its report; rerun it with --force"},
		RunE:        func(cmd *cobra.Command, _ []string) error { return runDemo(cmd, g, &o) },
	}
	f := cmd.Flags()
	f.StringVar(&o.out, "out", o.out, "folder for the world, the store and the reports")
	f.BoolVar(&o.force, "force", false, "replace what an earlier demo left in the folder")
	f.Uint64Var(&o.seed, "seed", o.seed, "seed of the invented world")
	f.IntVar(&o.grid, "grid", 0, "districts per side of the world (default: the simulator's 8)")
	f.Float64Var(&o.scale, "scale", 0, "multiplier on activity and map size (default: the simulator's 1)")
	f.IntVar(&o.draws, "draws", o.draws, "bootstrap draws of the estimators")
	f.Float64Var(&o.newcomerHR, "newcomer-hazard-ratio", 0, "plant newcomers who keep to one district and stop this many times as often after the import in import areas (0: none; changes the whole world)")
	return cmd
}

func (o *demoOptions) validate() error {
	switch {
	case o.out == "":
		return cli.Usagef("--out must name a folder")
	case o.grid != 0 && o.grid < 4:
		return cli.Usagef("--grid must be at least 4")
	case o.scale < 0:
		return cli.Usagef("--scale must not be negative")
	case o.draws < 99:
		return cli.Usagef("--draws must be at least 99")
	case o.newcomerHR < 0:
		return cli.Usagef("--newcomer-hazard-ratio must not be negative")
	}
	return nil
}

// config is the simulator's configuration the flags ask for.
func (o *demoOptions) config() sim.Config {
	cfg := sim.DefaultConfig()
	cfg.Seed = o.seed
	if o.grid > 0 {
		cfg.Cols, cfg.Rows = o.grid, o.grid
		cfg.Treated = max(4, o.grid*o.grid/4)
	}
	if o.scale > 0 {
		cfg.Scale = o.scale
	}
	if o.newcomerHR > 0 {
		r := sim.DefaultRetention()
		r.HazardRatio = o.newcomerHR
		cfg.Retention = &r
	}
	return cfg
}

func runDemo(cmd *cobra.Command, g *cli.Globals, o *demoOptions) error {
	if err := o.validate(); err != nil {
		return err
	}
	return demo.Run(cmd.Context(), cli.NewProgress(cmd, g), cmd.OutOrStdout(),
		demo.Options{Dir: o.out, Force: o.force, Config: o.config(), Draws: o.draws})
}
