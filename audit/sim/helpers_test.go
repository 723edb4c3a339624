package sim_test

import (
	"compress/gzip"
	"context"
	"os"
	"path/filepath"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmxml"
)

// smallConfig is a quick world: 5×4 districts, 14 months, 6 treated in 3 cohorts.
func smallConfig() sim.Config {
	c := sim.DefaultConfig()
	c.Cols, c.Rows, c.Months = 5, 4, 14
	c.Treated, c.Waves = 6, 3
	c.BaselinePOIs, c.BaselineBuildings, c.BaselineRoads = 8, 20, 4
	c.ImportBuildings, c.ImportPOIs = 450, 12 // 450 buildings: two changesets at the 2,000-change cap
	return c
}

func generate(tb testing.TB, cfg sim.Config) (string, *sim.Truth) {
	tb.Helper()
	dir := tb.TempDir()
	tr, err := sim.Generate(context.Background(), cfg, dir, false)
	if err != nil {
		tb.Fatalf("Generate: %v", err)
	}
	return dir, tr
}

// readOSM parses a gzip'd OSM XML file with the osm module's own reader.
func readOSM(tb testing.TB, path string) []osm.Object {
	tb.Helper()
	f, err := os.Open(path)
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		tb.Fatalf("%s: %v", path, err)
	}
	sc := osmxml.New(context.Background(), zr)
	defer sc.Close()
	var out []osm.Object
	for sc.Scan() {
		out = append(out, sc.Object())
	}
	if err := sc.Err(); err != nil {
		tb.Fatalf("%s: %v", path, err)
	}
	return out
}

func readFile(tb testing.TB, dir, name string) []byte {
	tb.Helper()
	b, err := os.ReadFile(filepath.Join(dir, name))
	if err != nil {
		tb.Fatal(err)
	}
	return b
}
