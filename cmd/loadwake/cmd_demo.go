package main

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"time"

	"github.com/paulmach/orb"
	"github.com/spf13/cobra"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
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

// demoPaths are the places the demo writes.
type demoPaths struct{ world, store, report, proposal string }

func newDemoPaths(dir string) demoPaths {
	return demoPaths{world: filepath.Join(dir, "world"), store: filepath.Join(dir, "loadwake.db"),
		report: filepath.Join(dir, "report"), proposal: filepath.Join(dir, "proposal.geojson")}
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
	ctx, out, prog := cmd.Context(), cmd.OutOrStdout(), cli.NewProgress(cmd, g)
	if err := o.validate(); err != nil {
		return err
	}
	p := newDemoPaths(o.out)
	if entries, err := os.ReadDir(o.out); err == nil && len(entries) > 0 && !o.force {
		return fmt.Errorf("%w: %s", sim.ErrOutputExists, o.out)
	}
	// The store is rebuilt each time, so that a changed seed leaves no old history.
	if err := os.RemoveAll(p.store); err != nil {
		return err
	}
	start := time.Now()
	st, err := demoStore(ctx, prog, o.config(), p)
	if err != nil {
		return err
	}
	defer st.Close()
	in, err := demoStudy(ctx, prog, st, o, p)
	if err != nil {
		return err
	}
	done := prog.Step("demo: write the report")
	err = cli.WriteReports(io.Discard, p.report, in)
	done()
	if err != nil {
		return err
	}
	for _, line := range demoSummary(in.Audit, in.Checklist, p.report) {
		fmt.Fprintln(out, line)
	}
	fmt.Fprintf(out, "(invented data; world in %s, store in %s, %s)\n", p.world, p.store, time.Since(start).Round(100*time.Millisecond))
	return nil
}

// demoStore invents the world of cfg and returns its store, ingested and
// classified.
func demoStore(ctx context.Context, prog *cli.Progress, cfg sim.Config, p demoPaths) (*ingest.Store, error) {
	done := prog.Step("demo: invent the world")
	_, err := sim.Generate(ctx, cfg, p.world, true)
	done()
	if err != nil {
		return nil, err
	}
	st, err := ingest.Open(p.store, ingest.DefaultOptions())
	if err != nil {
		return nil, err
	}
	paths := []string{filepath.Join(p.world, sim.HistoryFile), filepath.Join(p.world, sim.ChangesetsFile)}
	_, err = ingest.Ingest(ctx, st, paths, ingest.IngestOptions{Progress: prog.Ingest()})
	if err == nil {
		err = demoClassify(ctx, prog, st)
	}
	if err != nil {
		st.Close()
		return nil, err
	}
	return st, nil
}

// demoClassify runs the classification pass with a progress bar.
func demoClassify(ctx context.Context, prog *cli.Progress, st *ingest.Store) error {
	stats, err := st.Stats(ctx)
	if err != nil {
		return err
	}
	hook, done := prog.Classify(stats.Versions())
	defer done()
	_, err = layers.Run(ctx, st, rules.Default(), layers.Options{Progress: hook})
	return err
}

// demoStudy audits the largest import over the districts, builds its
// checklist and assesses the invented follow-up proposal: what the reports
// show.
func demoStudy(ctx context.Context, prog *cli.Progress, st *ingest.Store, o *demoOptions, p demoPaths) (report.Input, error) {
	r := rules.Default()
	done := prog.Step("demo: find imports")
	eps, err := episode.Detect(ctx, st, r, episode.Options{})
	done()
	if err != nil {
		return report.Input{}, err
	}
	ep := largestEpisode(eps)
	if ep == nil {
		return report.Input{}, errors.New("demo: the simulated world holds no detected import")
	}
	units, err := spatial.Parse(filepath.Join(p.world, sim.DistrictsFile), spatial.Options{})
	if err != nil {
		return report.Input{}, err
	}
	eo := did.DefaultOptions()
	eo.Draws = o.draws
	ao := audit.Options{Estimate: eo, UnitSpec: sim.DistrictsFile, Generator: cli.Generator(ctx, st, true)}
	done = prog.Step("demo: audit " + ep.ID)
	rep, err := audit.Run(ctx, st, ep, eps, units, ao)
	done()
	if err != nil {
		return report.Input{}, err
	}
	done = prog.Step("demo: checklist " + ep.ID)
	cl, err := audit.ChecklistOf(ctx, st, r, ep, eps, units, study.Options{}, checklist.Options{})
	done()
	if err != nil {
		return report.Input{}, fmt.Errorf("checklist: %w", err)
	}
	done = prog.Step("demo: assess the invented proposal")
	a, err := demoAssessment(ctx, st, r, p.proposal, units, rep, eps, ao, o.seed)
	done()
	if err != nil {
		return report.Input{}, fmt.Errorf("assessment: %w", err)
	}
	return cli.ReportInput(rep, units, cl, a), nil
}

// largestEpisode picks the episode with the most changesets, then the most
// versions.
func largestEpisode(eps []episode.Episode) *episode.Episode {
	var best *episode.Episode
	for i := range eps {
		e := &eps[i]
		if best == nil || len(e.Changesets) > len(best.Changesets) ||
			(len(e.Changesets) == len(best.Changesets) && e.Versions() > best.Versions()) {
			best = e
		}
	}
	return best
}

// demoSummary is the five lines the demo prints: the import, the units, the
// headline effect per layer with its interval, the top neglected key and
// where the report is.
func demoSummary(rep *audit.Report, cl *checklist.Checklist, dir string) []string {
	lines := []string{
		fmt.Sprintf("import:    %s by %s, %d changesets, %s to %s, %d objects created", rep.Import.ID,
			cli.JoinOr(rep.Import.Accounts, "no account"), rep.Import.Changesets, rep.Import.FirstMonth, rep.Import.LastMonth, rep.Import.Created),
		fmt.Sprintf("units:     %d districts: %d import areas, %d matched comparison areas, %d excluded, %d left out",
			rep.Units.Total, rep.Units.Treated, rep.Units.Controls, rep.Units.Excluded, rep.Units.Dropped),
	}
	eff := ""
	for _, l := range layers.Layers {
		for _, e := range rep.Effects {
			if e.Layer == l.String() && e.Estimator == did.Headline {
				if eff != "" {
					eff += "; "
				}
				if e.RelativeEffect != nil {
					eff += fmt.Sprintf("%s %+.0f%% [%+.0f%%, %+.0f%%]", e.Layer, 100**e.RelativeEffect, 100*e.CI95[0], 100*e.CI95[1])
				} else {
					eff += fmt.Sprintf("%s ATT %+.2f [%+.2f, %+.2f]", e.Layer, e.ATT, e.CI95[0], e.CI95[1])
				}
			}
		}
	}
	if eff == "" {
		eff = "no " + did.Headline + " estimate (see the warnings in the report)"
	}
	lines = append(lines, "effects:   "+did.Headline+", 95% interval: "+eff)
	if row, ok := report.TopNeglected(cl); ok {
		lines = append(lines, fmt.Sprintf("neglected: %s on %s: %.0f%% of imported features vs %.0f%% of comparable ones (%d without it)",
			row.Key, row.Class, 100*row.ImportShare, 100*row.ReferenceShare, row.Affected))
	} else {
		lines = append(lines, "neglected: no key flagged")
	}
	lines = append(lines, "report:    "+filepath.Join(dir, report.FileHTML)+" (and report.md, report.json, units.geojson, panel.csv)")
	return lines
}

// demoAssessment writes the simulator's invented follow-up proposal for
// three districts the import did not reach and assesses it.
func demoAssessment(ctx context.Context, st *ingest.Store, r *rules.RuleSet, path string, units *spatial.Units,
	rep *audit.Report, eps []episode.Episode, ao audit.Options, seed uint64) (*proposal.Assessment, error) {
	var areas []orb.Bound
	for _, u := range rep.UnitList {
		i, ok := units.Index(u.ID)
		if ok && (u.Status == study.StatusCandidate || u.Status == study.StatusControl) && len(areas) < 3 {
			areas = append(areas, units.Bound(i))
		}
	}
	if len(areas) == 0 {
		return nil, errors.New("no untouched district for the invented proposal")
	}
	data, err := sim.Proposal(areas, seed)
	if err != nil {
		return nil, err
	}
	if err := os.WriteFile(path, data, 0o644); err != nil {
		return nil, err
	}
	p, err := proposal.ReadGeoJSON(ctx, path, bytes.NewReader(data), r, proposal.Options{})
	if err != nil {
		return nil, err
	}
	return audit.Assess(ctx, st, r, p, audit.AssessOptions{Audit: ao,
		Proposal: proposal.AssessOptions{Units: units, Episodes: eps}})
}
