package demo

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

// Options is what a demo run is asked for.
type Options struct {
	Dir    string     // folder for the world, the store and the reports
	Force  bool       // replace what an earlier demo left in Dir
	Config sim.Config // the invented world
	Draws  int        // bootstrap draws of the estimators
}

// Paths are the places the demo writes under its folder.
type Paths struct{ World, Store, Report, Proposal string }

// NewPaths returns the demo's places under dir.
func NewPaths(dir string) Paths {
	return Paths{World: filepath.Join(dir, "world"), Store: filepath.Join(dir, "loadwake.db"),
		Report: filepath.Join(dir, "report"), Proposal: filepath.Join(dir, "proposal.geojson")}
}

// Run invents the world of o.Config under o.Dir, ingests and classifies its
// history into a fresh store there, audits the largest import, builds its
// checklist, assesses the invented follow-up proposal, writes the reports
// into the report folder and prints the summary to out. A folder that is not
// empty is refused without o.Force (sim.ErrOutputExists).
func Run(ctx context.Context, prog *cli.Progress, out io.Writer, o Options) error {
	p := NewPaths(o.Dir)
	if entries, err := os.ReadDir(o.Dir); err == nil && len(entries) > 0 && !o.Force {
		return fmt.Errorf("%w: %s", sim.ErrOutputExists, o.Dir)
	}
	// The store is rebuilt each time, so that a changed seed leaves no old history.
	if err := os.RemoveAll(p.Store); err != nil {
		return err
	}
	start := time.Now()
	st, err := world(ctx, prog, o.Config, p)
	if err != nil {
		return err
	}
	defer st.Close()
	in, err := review(ctx, prog, st, o, p)
	if err != nil {
		return err
	}
	done := prog.Step("demo: write the report")
	err = cli.WriteReports(io.Discard, p.Report, in)
	done()
	if err != nil {
		return err
	}
	for _, line := range Summary(in.Audit, in.Checklist, p.Report) {
		fmt.Fprintln(out, line)
	}
	fmt.Fprintf(out, "(invented data; world in %s, store in %s, %s)\n", p.World, p.Store, time.Since(start).Round(100*time.Millisecond))
	return nil
}

// world invents the world of cfg and returns its store, ingested and
// classified.
func world(ctx context.Context, prog *cli.Progress, cfg sim.Config, p Paths) (*ingest.Store, error) {
	done := prog.Step("demo: invent the world")
	_, err := sim.Generate(ctx, cfg, p.World, true)
	done()
	if err != nil {
		return nil, err
	}
	st, err := ingest.Open(p.Store, ingest.DefaultOptions())
	if err != nil {
		return nil, err
	}
	paths := []string{filepath.Join(p.World, sim.HistoryFile), filepath.Join(p.World, sim.ChangesetsFile)}
	_, err = ingest.Ingest(ctx, st, paths, ingest.IngestOptions{Progress: prog.Ingest()})
	if err == nil {
		err = classify(ctx, prog, st)
	}
	if err != nil {
		st.Close()
		return nil, err
	}
	return st, nil
}

// classify runs the classification pass with a progress bar.
func classify(ctx context.Context, prog *cli.Progress, st *ingest.Store) error {
	stats, err := st.Stats(ctx)
	if err != nil {
		return err
	}
	hook, done := prog.Classify(stats.Versions())
	defer done()
	_, err = layers.Run(ctx, st, rules.Default(), layers.Options{Progress: hook})
	return err
}

// review audits the largest import over the districts, builds its
// checklist and assesses the invented follow-up proposal: what the reports
// show.
func review(ctx context.Context, prog *cli.Progress, st *ingest.Store, o Options, p Paths) (report.Input, error) {
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
	units, err := spatial.Parse(filepath.Join(p.World, sim.DistrictsFile), spatial.Options{})
	if err != nil {
		return report.Input{}, err
	}
	eo := did.DefaultOptions()
	eo.Draws = o.Draws
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
	a, err := assessment(ctx, st, r, p.Proposal, units, rep, eps, ao, o.Config.Seed)
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

// Summary is the five lines the demo prints: the import, the units, the
// headline effect per layer with its interval, the top neglected key and
// where the report is.
func Summary(rep *audit.Report, cl *checklist.Checklist, dir string) []string {
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

// assessment writes the simulator's invented follow-up proposal for
// three districts the import did not reach and assesses it.
func assessment(ctx context.Context, st *ingest.Store, r *rules.RuleSet, path string, units *spatial.Units,
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
