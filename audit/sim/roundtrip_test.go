package sim_test

import (
	"context"
	"path/filepath"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/internal/simtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/osm"
)

// TestRoundTrip ingests a simulated world into an in-memory store, classifies
// it with the default rules and checks that the store's counts equal the
// generator's and that the classifier's per-layer events equal the truth
// tallies, organic and import edits apart. make validate runs it on the
// default-size world.
func TestRoundTrip(t *testing.T) {
	cfg := smallConfig()
	if simtest.Validate {
		cfg = sim.DefaultConfig() // some 200,000 versions
		cfg.Dynamic, cfg.TrendSelection = true, true
	}
	roundTrip(t, cfg)
}

func roundTrip(t *testing.T, cfg sim.Config) {
	ctx := context.Background()
	dir, tr := generate(t, cfg)
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	rep, err := ingest.Ingest(ctx, st, []string{filepath.Join(dir, sim.HistoryFile), filepath.Join(dir, sim.ChangesetsFile)}, ingest.IngestOptions{})
	if err != nil {
		t.Fatalf("Ingest: %v", err)
	}
	ta, tot := tr.Tallies, rep.Totals
	for _, c := range []struct {
		name      string
		got, want int64
	}{
		{"nodes", tot.Nodes, ta.Nodes},
		{"ways", tot.Ways, ta.Ways},
		{"relations", tot.Relations, 0},
		{"node versions", tot.NodeVersions, ta.NodeVersions},
		{"way versions", tot.WayVersions, ta.WayVersions},
		{"relation versions", tot.RelationVersions, ta.RelationVersions},
		{"changesets", tot.Changesets, ta.Changesets},
	} {
		if c.got != c.want {
			t.Errorf("store %s = %d, generator wrote %d", c.name, c.got, c.want)
		}
	}
	if _, err := layers.Run(ctx, st, rules.Default(), layers.Options{}); err != nil {
		t.Fatalf("layers.Run: %v", err)
	}
	imports := map[osm.ChangesetID]bool{}
	for _, id := range tr.ImportChangesets {
		imports[osm.ChangesetID(id)] = true
	}
	var organic, imported sim.LayerCounts
	monthly := map[string][][]int64{}
	for _, l := range []string{"geometry", "attribute", "new_feature", "deletion", "bookkeeping"} {
		m := make([][]int64, cfg.Districts())
		for d := range m {
			m[d] = make([]int64, cfg.Months)
		}
		monthly[l] = m
	}
	start := cfg.Start
	err = layers.ScanEvents(ctx, st, time.Time{}, time.Time{}, func(e *layers.Event) error {
		c := &organic
		if imports[e.Changeset] {
			c = &imported
		}
		switch e.Layer {
		case layers.Geometry:
			c.Geometry++
		case layers.Attribute:
			c.Attribute++
		case layers.NewFeature:
			c.NewFeature++
		case layers.Deletion:
			c.Deletion++
		case layers.Bookkeeping:
			c.Bookkeeping++
		}
		if c == &organic && !e.Time.Before(start) && e.Located {
			m := (e.Time.Year()-start.Year())*12 + int(e.Time.Month()-start.Month())
			col := int((e.Location.Lon() - cfg.OriginLon) / cfg.CellDeg)
			row := int((e.Location.Lat() - cfg.OriginLat) / cfg.CellDeg)
			if m < cfg.Months && col >= 0 && col < cfg.Cols && row >= 0 && row < cfg.Rows {
				monthly[e.Layer.String()][row*cfg.Cols+col][m]++
			}
		}
		return nil
	})
	if err != nil {
		t.Fatalf("ScanEvents: %v", err)
	}
	if organic != ta.Organic {
		t.Errorf("organic events per layer:\nclassifier %+v\ntruth      %+v", organic, ta.Organic)
	}
	if imported != ta.Import {
		t.Errorf("import events per layer:\nclassifier %+v\ntruth      %+v", imported, ta.Import)
	}
	// Per district-month, with events placed by their location.
	for l, m := range monthly {
		want := ta.Monthly.Layer(l)
		diff := 0
		for d := range m {
			for mo := range m[d] {
				if m[d][mo] != want[d][mo] {
					diff++
				}
			}
		}
		if diff > 0 {
			t.Errorf("%s: %d district-months differ between classifier and truth", l, diff)
		}
	}
}
