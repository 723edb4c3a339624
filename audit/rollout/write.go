package rollout

import (
	"bufio"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"

	"github.com/paulmach/orb/geojson"

	"github.com/loadwake/loadwake/audit/proposal"
)

// chunks returns the upload files of wave w (0-based; −1 the unplaced
// features): groups of features that share nodes packed in order into
// files of at most proposal.APIChangesetLimit changes, so that each file
// fits one changeset (OSM API v0.6 capabilities: changesets
// maximum_elements 10000).
func (pl *Plan) chunks(w int) ([]*osmObjects, error) {
	var out []*osmObjects
	cur := newOSMObjects()
	for _, comp := range components(pl.proposal.Features) {
		if pl.featureWave[comp[0]] != w {
			continue
		}
		one := newOSMObjects()
		for _, i := range comp {
			one.add(&pl.proposal.Features[i])
		}
		if one.changes() > proposal.APIChangesetLimit {
			return nil, fmt.Errorf("%w: features %s and %d others share nodes and need %d changes together, more than one changeset's %d",
				ErrPlan, pl.proposal.Features[comp[0]].ID, len(comp)-1, one.changes(), proposal.APIChangesetLimit)
		}
		if cur.changes()+one.changes() > proposal.APIChangesetLimit {
			out = append(out, cur)
			cur = newOSMObjects()
		}
		for _, i := range comp {
			cur.add(&pl.proposal.Features[i])
		}
	}
	if cur.changes() > 0 {
		out = append(out, cur)
	}
	return out, nil
}

// WaveFileName is the name of wave w's part k (both 1-based) of parts files.
func WaveFileName(w, k, parts int) string {
	if parts == 1 {
		return fmt.Sprintf("wave-%d.osc", w)
	}
	return fmt.Sprintf("wave-%d-part-%d.osc", w, k)
}

// WriteWaves writes one OsmChange file per wave into dir (wave-1.osc, or
// wave-1-part-2.osc when a wave needs more than one changeset), and the
// features in no unit into unplaced.osc, and records the names in the wave
// list. It returns the paths written.
func (pl *Plan) WriteWaves(dir string) ([]string, error) {
	if pl.proposal == nil {
		return nil, fmt.Errorf("%w: a plan read back from JSON holds no features; run loadwake plan for the wave files", ErrPlan)
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return nil, fmt.Errorf("rollout: create %s: %w", dir, err)
	}
	var paths []string
	write := func(name, comment string, o *osmObjects) error {
		path := filepath.Join(dir, name)
		f, err := os.Create(path)
		if err != nil {
			return fmt.Errorf("rollout: create wave file: %w", err)
		}
		if err := o.writeOsmChange(f, comment); err != nil {
			f.Close()
			return fmt.Errorf("rollout: write %s: %w", path, err)
		}
		if err := f.Close(); err != nil {
			return fmt.Errorf("rollout: write %s: %w", path, err)
		}
		paths = append(paths, path)
		return nil
	}
	for w := range pl.WaveList {
		files, err := pl.chunks(w)
		if err != nil {
			return nil, err
		}
		pl.WaveList[w].Files = nil
		for k, o := range files {
			name := WaveFileName(w+1, k+1, len(files))
			comment := fmt.Sprintf("wave %d of %d, planned for %s, part %d of %d; seed %d. Review in an editor and follow the community's import guidelines before any upload.",
				w+1, pl.Waves, pl.WaveList[w].Start, k+1, len(files), pl.Seed)
			if err := write(name, comment, o); err != nil {
				return nil, err
			}
			pl.WaveList[w].Files = append(pl.WaveList[w].Files, name)
		}
	}
	if len(pl.Unplaced) > 0 {
		files, err := pl.chunks(-1)
		if err != nil {
			return nil, err
		}
		for k, o := range files {
			name := "unplaced.osc"
			if len(files) > 1 {
				name = fmt.Sprintf("unplaced-part-%d.osc", k+1)
			}
			if err := write(name, "features in no unit of the plan: place them in a wave by hand or leave them out", o); err != nil {
				return nil, err
			}
		}
	}
	return paths, nil
}

// WriteJSON writes the plan as one JSON object (schema loadwake-plan/1).
func (pl *Plan) WriteJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	if err := enc.Encode(pl); err != nil {
		return fmt.Errorf("rollout: encode plan: %w", err)
	}
	return nil
}

// WriteCSV writes one row per unit: unit, name, block, wave, start month,
// features, changes, activity.
func (pl *Plan) WriteCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	cw.Write([]string{"unit", "name", "block", "wave", "start_month", "comparison", "features", "activity_per_month"})
	for _, u := range pl.Units {
		cw.Write([]string{u.ID, u.Name, u.Block, strconv.Itoa(u.Wave), u.Start, strconv.FormatBool(u.Wave == pl.Waves),
			strconv.Itoa(u.Features), strconv.FormatFloat(u.Activity, 'f', 3, 64)})
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("rollout: write plan CSV: %w", err)
	}
	return nil
}

// WriteGeoJSON writes the plan's units as RFC 7946 features with their
// wave and planned start month.
func (pl *Plan) WriteGeoJSON(w io.Writer) error {
	if pl.units == nil {
		return fmt.Errorf("%w: a plan read back from JSON holds no unit shapes; run loadwake plan for the GeoJSON", ErrPlan)
	}
	fc := geojson.NewFeatureCollection()
	for _, u := range pl.Units {
		f := geojson.NewFeature(pl.units.Geometry(u.index))
		f.Properties["id"] = u.ID
		if u.Name != "" {
			f.Properties["name"] = u.Name
		}
		if u.Block != "" {
			f.Properties["block"] = u.Block
		}
		f.Properties["wave"] = u.Wave
		f.Properties["start_month"] = u.Start
		f.Properties["comparison"] = u.Wave == pl.Waves
		f.Properties["features"] = u.Features
		f.Properties["activity_per_month"] = u.Activity
		fc.Append(f)
	}
	b, err := json.MarshalIndent(fc, "", " ")
	if err != nil {
		return fmt.Errorf("rollout: encode plan GeoJSON: %w", err)
	}
	_, err = w.Write(append(b, '\n'))
	return err
}

// WriteSummary writes the plan in a few lines of text: the waves, the
// minimum detectable effects of the plan's outcome and the looks.
func (pl *Plan) WriteSummary(w io.Writer) error {
	bw := bufio.NewWriter(w)
	fmt.Fprintf(bw, "plan: %d features in %d units of %s, %d waves %d months apart from %s, evaluation %s, seed %d\n",
		pl.Features, len(pl.Units), pl.UnitSpec, pl.Waves, pl.MonthsBetween, pl.Start, pl.Evaluation, pl.Seed)
	for _, wv := range pl.WaveList {
		role := ""
		if wv.Comparison {
			role = " (comparison until the evaluation)"
		}
		fmt.Fprintf(bw, "  wave %d %s: %d units, %d features, %d changes in %d changeset(s), %.1f past edits/month, SMD %+.2f%s\n",
			wv.Wave, wv.Start, wv.Units, wv.Features, wv.Changes, wv.Changesets, wv.MeanActivity, wv.SMD, role)
	}
	if pl.Power != nil {
		fmt.Fprintf(bw, "minimum detectable effects at %.0f%% power, %.0f%% level (%d simulated evaluations per design, Monte Carlo error up to ±%.0f points):\n",
			100*pl.Power.Target, 100*pl.Power.Alpha, pl.Power.Worlds, 196*pl.Power.MCError)
		for _, c := range pl.Power.Curves {
			fmt.Fprintf(bw, "  %-22s %-12s fall %-12s rise %s\n", c.Design, c.Layer, mdeText(c.MDEFall), mdeText(c.MDERise))
		}
	}
	for i, l := range pl.Looks {
		fmt.Fprintf(bw, "  look %d at %s: information %.2f, |z| boundary %.3f\n", i+1, l.Month, l.Fraction, l.Boundary)
	}
	for _, n := range pl.Notes {
		fmt.Fprintf(bw, "note: %s\n", n)
	}
	fmt.Fprintln(bw, "A plan is for the community's review: community approval, the import guidelines and local review come first.")
	return bw.Flush()
}

func mdeText(v *float64) string {
	if v == nil {
		return "not reached"
	}
	return fmt.Sprintf("%+.0f%%", 100**v)
}
