// Package worldtest builds invented worlds for tests: a world of audit/sim is
// generated, ingested into an in-memory store and classified, its imports
// detected and its districts read as units. It is for tests only, and the one
// audit package allowed to import ingest (layering_test.go).
package worldtest

import (
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// World is a simulated world ingested and classified in an in-memory store.
// Simulated data: invented, as the project's rules ask for estimator checks.
type World struct {
	Dir      string
	Store    *ingest.Store
	Truth    *sim.Truth
	Rules    *rules.RuleSet
	Episodes []episode.Episode
	Units    *spatial.Units
}

// Build generates a world with cfg, ingests and classifies it with the
// built-in rules, detects its imports and reads its districts as units.
func Build(tb testing.TB, cfg sim.Config) *World {
	tb.Helper()
	return BuildWith(tb, cfg, rules.Default())
}

// BuildWith is Build with the rules r.
func BuildWith(tb testing.TB, cfg sim.Config, r *rules.RuleSet) *World {
	tb.Helper()
	ctx := context.Background()
	dir := tb.TempDir()
	truth, err := sim.Generate(ctx, cfg, dir, false)
	if err != nil {
		tb.Fatalf("generate: %v", err)
	}
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { st.Close() })
	paths := []string{filepath.Join(dir, sim.HistoryFile), filepath.Join(dir, sim.ChangesetsFile)}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		tb.Fatalf("ingest: %v", err)
	}
	if _, err := layers.Run(ctx, st, r, layers.Options{}); err != nil {
		tb.Fatalf("classify: %v", err)
	}
	eps, err := episode.Detect(ctx, st, r, episode.Options{})
	if err != nil {
		tb.Fatalf("detect: %v", err)
	}
	units, err := spatial.Parse(filepath.Join(dir, sim.DistrictsFile), spatial.Options{})
	if err != nil {
		tb.Fatalf("units: %v", err)
	}
	return &World{Dir: dir, Store: st, Truth: truth, Rules: r, Episodes: eps, Units: units}
}

// Named returns the episode made of the world's planted import changesets
// (truth.json), as a user naming them with --changesets would get it.
func (w *World) Named(tb testing.TB) *episode.Episode {
	tb.Helper()
	eps, err := episode.Detect(context.Background(), w.Store, w.Rules, episode.Options{Changesets: w.Truth.ImportChangesets})
	if err != nil || len(eps) == 0 {
		tb.Fatalf("detect named: %v (%d episodes)", err, len(eps))
	}
	return &eps[0]
}

// osmTestdata is the osm module's testdata folder in the module cache.
const osmTestdata = "github.com/paulmach/osm@v0.8.0/testdata"

// OSMFixture returns the path of a file of the osm module's testdata (real
// OpenStreetMap extracts and histories, © OpenStreetMap contributors, ODbL)
// in the module cache, skipping the test when there is no module cache.
func OSMFixture(tb testing.TB, name string) string {
	tb.Helper()
	if d := os.Getenv("GOMODCACHE"); d != "" {
		return filepath.Join(d, osmTestdata, name)
	}
	if d := os.Getenv("GOPATH"); d != "" {
		return filepath.Join(strings.Split(d, string(os.PathListSeparator))[0], "pkg", "mod", osmTestdata, name)
	}
	home, err := os.UserHomeDir()
	if err != nil {
		tb.Skip("no module cache")
	}
	return filepath.Join(home, "go", "pkg", "mod", osmTestdata, name)
}

// ChecklistRules are the default rules with amenity collapsed to amenity=*, the
// class the simulator plants amenity key rates under.
func ChecklistRules(tb testing.TB) *rules.RuleSet {
	tb.Helper()
	y := string(rules.DefaultYAML())
	const from = "{key: amenity, detail: value}"
	if !strings.Contains(y, from) {
		tb.Fatalf("default rules no longer hold %q", from)
	}
	r, err := rules.Parse("checklist-test.yaml", []byte(strings.Replace(y, from, "{key: amenity, detail: key}", 1)))
	if err != nil {
		tb.Fatal(err)
	}
	return r
}
