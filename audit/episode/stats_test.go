package episode

import (
	"context"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// countingStore counts the version scans Detect makes.
type countingStore struct {
	*ingest.Store
	scans int
}

func (c *countingStore) ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error {
	c.scans++
	return c.Store.ScanVersions(ctx, t, fn)
}

// classifiedWorld ingests and classifies a small invented world (audit/sim).
func classifiedWorld(tb testing.TB) *ingest.Store {
	tb.Helper()
	ctx := context.Background()
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months = 3, 3, 10
	cfg.Treated, cfg.Waves = 2, 1
	cfg.Scale = 0.25
	cfg.ChangesetLimit = 40
	dir := tb.TempDir()
	if _, err := sim.Generate(ctx, cfg, dir, false); err != nil {
		tb.Fatal(err)
	}
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { st.Close() })
	paths := []string{filepath.Join(dir, sim.ChangesetsFile), filepath.Join(dir, sim.HistoryFile)}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		tb.Fatal(err)
	}
	if _, err := layers.Run(ctx, st, rules.Default(), layers.Options{Workers: 1}); err != nil {
		tb.Fatal(err)
	}
	return st
}

// TestSpillSameEpisodes counts with a spill after every 1, 2 and 7
// changesets: the partial counters added up give the episodes counting all
// in memory gives, named or found by the rules.
func TestSpillSameEpisodes(t *testing.T) {
	ctx := context.Background()
	r := gapRules(t, "30")
	for _, base := range []Options{{}, {IncludeEmpty: true}, {Account: "harbourdata_import"}, {Changesets: []int64{30, 11}}} {
		want, err := Detect(ctx, history(), r, base)
		if err != nil {
			t.Fatal(err)
		}
		for _, spill := range []int{1, 2, 7} {
			opts := base
			opts.spill = spill
			got, err := Detect(ctx, history(), r, opts)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(got, want) {
				t.Errorf("%+v spill %d: got %+v, want %+v", base, spill, got, want)
			}
		}
	}
}

// TestStoredCounters runs Detect twice on a classified store: the second run
// reads no versions and gives the same episodes; other rules count again;
// a spill every 50 changesets gives the same episodes.
func TestStoredCounters(t *testing.T) {
	ctx := context.Background()
	st := &countingStore{Store: classifiedWorld(t)}
	r := rules.Default()
	first, err := Detect(ctx, st, r, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(first) == 0 || st.scans != 3 {
		t.Fatalf("%d episodes, %d version scans", len(first), st.scans)
	}
	st.scans = 0
	second, err := Detect(ctx, st, r, Options{})
	if err != nil {
		t.Fatal(err)
	}
	if st.scans != 0 || !reflect.DeepEqual(first, second) {
		t.Errorf("second run: %d version scans, same episodes %v", st.scans, reflect.DeepEqual(first, second))
	}
	named, err := Detect(ctx, st, r, Options{Changesets: []int64{int64(first[0].Changesets[0])}})
	if err != nil || len(named) != 1 || st.scans != 0 {
		t.Errorf("named from stored counters: %v, %d episodes, %d scans", err, len(named), st.scans)
	}

	other, err := rules.Parse("other.yaml", []byte(strings.Replace(string(rules.DefaultYAML()), "group_gap_days: 365", "group_gap_days: 364", 1)))
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Detect(ctx, st, other, Options{}); err != nil || st.scans != 3 {
		t.Errorf("other rules: %v, %d version scans, want 3", err, st.scans)
	}

	fresh := newMemDerived()
	spilled, err := Detect(ctx, struct {
		Source
		*memDerived
	}{st, fresh}, r, Options{spill: 50})
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(spilled, first) {
		t.Errorf("spill every 50 changesets: %d episodes, want %d equal ones", len(spilled), len(first))
	}
}
