// Package worldtest builds invented worlds for tests: a world of audit/sim is
// generated, ingested into an in-memory store and classified, its imports
// detected and its districts read as units. It is for tests only, and the one
// audit package allowed to import ingest (layering_test.go).
package worldtest

import (
	"context"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
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

// shared holds the worlds Shared built, one per configuration, for the life
// of the test binary: tests that only read a world share one build.
var shared struct {
	sync.Mutex
	worlds map[string]*World
}

// Shared is Build for tests that only read the world (no writes to its
// store): the first call with a configuration builds it, later calls in the
// same test binary return the same world. Its store stays open until the
// binary exits.
func Shared(tb testing.TB, cfg sim.Config) *World {
	tb.Helper()
	key, err := json.Marshal(cfg)
	if err != nil {
		tb.Fatal(err)
	}
	shared.Lock()
	defer shared.Unlock()
	if w, ok := shared.worlds[string(key)]; ok {
		return w
	}
	dir, err := os.MkdirTemp("", "worldtest-")
	if err != nil {
		tb.Fatal(err)
	}
	w, err := build(context.Background(), cfg, rules.Default(), dir)
	if err != nil {
		tb.Fatal(err)
	}
	if shared.worlds == nil {
		shared.worlds = map[string]*World{}
	}
	shared.worlds[string(key)] = w
	return w
}

// BuildWith is Build with the rules r.
func BuildWith(tb testing.TB, cfg sim.Config, r *rules.RuleSet) *World {
	tb.Helper()
	w, err := build(context.Background(), cfg, r, tb.TempDir())
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { w.Store.Close() })
	return w
}

func build(ctx context.Context, cfg sim.Config, r *rules.RuleSet, dir string) (*World, error) {
	truth, err := sim.Generate(ctx, cfg, dir, false)
	if err != nil {
		return nil, fmt.Errorf("generate: %w", err)
	}
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		return nil, err
	}
	fail := func(step string, err error) (*World, error) {
		st.Close()
		return nil, fmt.Errorf("%s: %w", step, err)
	}
	paths := []string{filepath.Join(dir, sim.HistoryFile), filepath.Join(dir, sim.ChangesetsFile)}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		return fail("ingest", err)
	}
	if _, err := layers.Run(ctx, st, r, layers.Options{}); err != nil {
		return fail("classify", err)
	}
	eps, err := episode.Detect(ctx, st, r, episode.Options{})
	if err != nil {
		return fail("detect", err)
	}
	units, err := spatial.Parse(filepath.Join(dir, sim.DistrictsFile), spatial.Options{})
	if err != nil {
		return fail("units", err)
	}
	return &World{Dir: dir, Store: st, Truth: truth, Rules: r, Episodes: eps, Units: units}, nil
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
