package rollout

import (
	"bytes"
	"context"
	"encoding/json"
	"encoding/xml"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/power"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/sim"
)

// planWorld plans the simulator's invented proposal over eight districts of
// a small invented world, three waves, with a tiny power simulation unless
// skipPower.
func planWorld(t *testing.T, seed uint64, skipPower bool) (*Plan, *proposal.Proposal) {
	t.Helper()
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months, cfg.Treated, cfg.Waves = 4, 4, 24, 4, 2
	w := worldtest.Shared(t, cfg)
	var areas []orb.Bound
	for i := range 8 {
		areas = append(areas, w.Units.Bound(i))
	}
	data, err := sim.Proposal(areas, 3)
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	p, err := proposal.ReadGeoJSON(ctx, "proposal.geojson", bytes.NewReader(data), w.Rules, proposal.Options{})
	if err != nil {
		t.Fatal(err)
	}
	pl, err := Make(ctx, w.Store, p, w.Units, "districts.geojson", Options{Waves: 3, MonthsBetween: 2, Before: 6, History: 12, Seed: seed,
		SkipPower: skipPower, Power: power.Options{Worlds: 2, Effects: []float64{-0.5}, Draws: 99}})
	if err != nil {
		t.Fatal(err)
	}
	return pl, p
}

func TestMakeOnSimulatedWorld(t *testing.T) {
	if testing.Short() {
		t.Skip("simulated world: skipped with -short")
	}
	pl, p := planWorld(t, 2026, false)
	t.Run("units and waves", func(t *testing.T) {
		if len(pl.Units) != 8 {
			t.Fatalf("%d units, want the 8 districts of the proposal", len(pl.Units))
		}
		act := make([]float64, len(pl.Units))
		for i, u := range pl.Units {
			act[i] = u.Activity
		}
		want, _ := Assign(act, nil, 3, 2026)
		feats := 0
		for i, u := range pl.Units {
			if u.Wave != want[i]+1 {
				t.Errorf("unit %s: wave %d, Assign gives %d", u.ID, u.Wave, want[i]+1)
			}
			feats += u.Features
		}
		if feats != len(p.Features) {
			t.Errorf("units hold %d features, the proposal %d", feats, len(p.Features))
		}
		if pl.WaveList[0].Start != pl.Start || pl.WaveList[2].Start != pl.Evaluation {
			t.Errorf("waves start %s..%s, plan %s, evaluation %s", pl.WaveList[0].Start, pl.WaveList[2].Start, pl.Start, pl.Evaluation)
		}
	})
	t.Run("same seed same plan", func(t *testing.T) {
		again, _ := planWorld(t, 2026, true)
		var a, b bytes.Buffer
		pl.WriteCSV(&a)
		again.WriteCSV(&b)
		if a.String() != b.String() {
			t.Errorf("two plans with seed 2026 differ:\n%s\n%s", a.String(), b.String())
		}
	})
	t.Run("wave files", func(t *testing.T) {
		dir := t.TempDir()
		paths, err := pl.WriteWaves(dir)
		if err != nil {
			t.Fatal(err)
		}
		if len(paths) != 3 {
			t.Fatalf("wrote %v, want one file per wave", paths)
		}
		for w, path := range paths {
			data, err := os.ReadFile(path)
			if err != nil {
				t.Fatal(err)
			}
			var c osm.Change
			if err := xml.Unmarshal(data, &c); err != nil {
				t.Fatalf("%s is not OsmChange: %v", path, err)
			}
			n := len(c.Create.Nodes) + len(c.Create.Ways) + len(c.Create.Relations)
			if n != pl.WaveList[w].Changes || n > proposal.APIChangesetLimit {
				t.Errorf("%s: %d changes, wave list says %d", filepath.Base(path), n, pl.WaveList[w].Changes)
			}
			tagged := 0
			for _, nd := range c.Create.Nodes {
				if len(nd.Tags) > 0 {
					tagged++
				}
			}
			if got := tagged + len(c.Create.Ways); got != pl.WaveList[w].Features {
				t.Errorf("%s: %d tagged nodes and ways, wave has %d features", filepath.Base(path), got, pl.WaveList[w].Features)
			}
		}
	})
	t.Run("pre-registration", func(t *testing.T) {
		var md, wiki bytes.Buffer
		if err := pl.WritePreregistration(&md); err != nil {
			t.Fatal(err)
		}
		if err := pl.WritePreregistrationWiki(&wiki); err != nil {
			t.Fatal(err)
		}
		for name, doc := range map[string]string{"markdown": md.String(), "wiki": wiki.String()} {
			for _, want := range []string{"2026", "community", "import guidelines", "local review", "ppml-twfe", "boundary", "Minimum detectable effects"} {
				if !strings.Contains(doc, want) {
					t.Errorf("%s pre-registration lacks %q", name, want)
				}
			}
		}
	})
	t.Run("json", func(t *testing.T) {
		var b bytes.Buffer
		if err := pl.WriteJSON(&b); err != nil {
			t.Fatal(err)
		}
		var back struct {
			Schema string `json:"schema"`
			Units  []Unit `json:"units"`
			Power  *power.Result
		}
		if err := json.Unmarshal(b.Bytes(), &back); err != nil || back.Schema != Schema || len(back.Units) != 8 || back.Power == nil {
			t.Errorf("plan JSON: %v, schema %q, %d units", err, back.Schema, len(back.Units))
		}
	})
}

// TestChunksUnderLimit splits a wave of 3,000 five-change polygons (15,000
// changes) into files of at most 10,000 changes each (OSM API v0.6
// capabilities: changesets maximum_elements 10000).
func TestChunksUnderLimit(t *testing.T) {
	var fs []proposal.Feature
	for i := range 3000 {
		x, y := float64(i%60)*0.001, float64(i/60)*0.001
		ring := orb.Ring{{x, y}, {x + 0.0005, y}, {x + 0.0005, y + 0.0005}, {x, y + 0.0005}, {x, y}}
		fs = append(fs, proposal.Feature{ID: fmt.Sprintf("feature/%d", i), Tags: osm.Tags{{Key: "building", Value: "yes"}}, Kind: proposal.KindPolygon, Geom: orb.Polygon{ring}})
	}
	pl := &Plan{proposal: &proposal.Proposal{Features: fs}, featureWave: make([]int, len(fs))}
	files, err := pl.chunks(0)
	if err != nil {
		t.Fatal(err)
	}
	total := 0
	for _, f := range files {
		if f.changes() > proposal.APIChangesetLimit {
			t.Errorf("a file of %d changes", f.changes())
		}
		total += f.changes()
	}
	if len(files) != 2 || total != 15000 {
		t.Errorf("%d files, %d changes; want 2 files, 15000 changes", len(files), total)
	}
}

// TestSharedNodesMove: two buildings sharing a wall, in units of different
// waves, go together in the earlier wave with the shared nodes once.
func TestSharedNodesMove(t *testing.T) {
	a := orb.Ring{{0, 0}, {1, 0}, {1, 1}, {0, 1}, {0, 0}}
	b := orb.Ring{{1, 0}, {2, 0}, {2, 1}, {1, 1}, {1, 0}}
	fs := []proposal.Feature{
		{ID: "feature/0", Tags: osm.Tags{{Key: "building", Value: "yes"}}, Geom: orb.Polygon{a}},
		{ID: "feature/1", Tags: osm.Tags{{Key: "building", Value: "yes"}}, Geom: orb.Polygon{b}},
	}
	pl := &Plan{proposal: &proposal.Proposal{Features: fs}, Units: []Unit{{index: 0, Wave: 2}, {index: 1, Wave: 1}}}
	pl.placeWaves([]int{0, 1})
	if pl.featureWave[0] != 0 || pl.featureWave[1] != 0 || pl.Moved != 1 {
		t.Fatalf("waves %v, moved %d; want both in wave 1, one moved", pl.featureWave, pl.Moved)
	}
	files, err := pl.chunks(0)
	if err != nil {
		t.Fatal(err)
	}
	if len(files) != 1 || len(files[0].nodes) != 6 || len(files[0].ways) != 2 {
		t.Errorf("%d files; nodes %d ways %d, want 6 nodes (2 shared) and 2 ways", len(files), len(files[0].nodes), len(files[0].ways))
	}
}

func TestNowiki(t *testing.T) {
	for _, tc := range []struct{ in, want string }{
		{"Harbour Lane", "<nowiki>Harbour Lane</nowiki>"},
		{"</nowiki>[[x]]{{y}}", "<nowiki>&lt;/nowiki&gt;[[x]]{{y}}</nowiki>"},
		{"", ""},
	} {
		t.Run(tc.in, func(t *testing.T) {
			if got := nowiki(tc.in); got != tc.want {
				t.Errorf("nowiki(%q) = %q, want %q", tc.in, got, tc.want)
			}
		})
	}
}
