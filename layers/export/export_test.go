package export_test

import (
	"context"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/parquet-go/parquet-go"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/layers/export"
	"github.com/loadwake/loadwake/rules"
)

// smallStore ingests and classifies a small invented world (audit/sim) in an
// in-memory store; the stores are shared by the tests, which only read them.
func smallStore(tb testing.TB, seed uint64) *ingest.Store {
	tb.Helper()
	if st, ok := stores[seed]; ok {
		return st
	}
	st := buildStore(tb, seed)
	stores[seed] = st
	return st
}

// stores holds the test worlds by seed (tests run one at a time).
var stores = map[uint64]*ingest.Store{}

func buildStore(tb testing.TB, seed uint64) *ingest.Store {
	tb.Helper()
	cfg := sim.DefaultConfig()
	cfg.Seed = seed
	cfg.Cols, cfg.Rows, cfg.Months = 3, 3, 8
	cfg.Treated, cfg.Waves = 2, 1
	cfg.Scale = 0.2
	return buildWorld(tb, cfg)
}

// buildWorld generates the world of cfg, ingests and classifies it.
func buildWorld(tb testing.TB, cfg sim.Config) *ingest.Store {
	tb.Helper()
	ctx := context.Background()
	dir := tb.TempDir()
	if _, err := sim.Generate(ctx, cfg, dir, false); err != nil {
		tb.Fatalf("generate: %v", err)
	}
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		tb.Fatal(err)
	}
	paths := []string{filepath.Join(dir, sim.HistoryFile), filepath.Join(dir, sim.ChangesetsFile)}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		tb.Fatalf("ingest: %v", err)
	}
	if _, err := layers.Run(ctx, st, rules.Default(), layers.Options{Workers: 1}); err != nil {
		tb.Fatalf("classify: %v", err)
	}
	return st
}

// readDataset reads every Parquet file of store in dir back with
// parquet-go's reader, with the month of its folder.
func readDataset[T any](tb testing.TB, dir, store string) (rows []T, months []string) {
	tb.Helper()
	files, err := filepath.Glob(filepath.Join(dir, "month=*", "part-"+store+"-*.parquet"))
	if err != nil {
		tb.Fatal(err)
	}
	slices.Sort(files)
	for _, f := range files {
		got, err := parquet.ReadFile[T](f)
		if err != nil {
			tb.Fatalf("read %s: %v", f, err)
		}
		month := strings.TrimPrefix(filepath.Base(filepath.Dir(f)), "month=")
		for range got {
			months = append(months, month)
		}
		rows = append(rows, got...)
	}
	return rows, months
}

func TestEventsRoundTrip(t *testing.T) {
	ctx := context.Background()
	st := smallStore(t, 3)
	dir := t.TempDir()
	m, err := export.Events(ctx, st, dir, export.Options{Store: "north", RowsPerFile: 5000})
	if err != nil {
		t.Fatal(err)
	}
	var want []export.EventRow
	var wantMonths []string
	err = layers.ScanEvents(ctx, st, time.Time{}, time.Time{}, func(e *layers.Event) error {
		want = append(want, export.EventRowOf("north", e))
		wantMonths = append(wantMonths, e.Time.UTC().Format("2006-01"))
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if len(want) < 400 {
		t.Fatalf("only %d events in the test world", len(want))
	}
	got, months := readDataset[export.EventRow](t, dir, "north")
	t.Run("rows", func(t *testing.T) {
		if len(got) != len(want) || m.Rows != int64(len(want)) {
			t.Fatalf("read %d rows, manifest %d, store %d events", len(got), m.Rows, len(want))
		}
		// Files sort by month, then part; events are in time order, so the
		// rows come back in the store's order.
		for i := range want {
			if len(got[i].Keys) == 0 {
				got[i].Keys = nil // an empty list reads back empty, not nil
			}
			if !equalJSON(t, got[i], want[i]) {
				t.Fatalf("row %d: got %+v, want %+v", i, got[i], want[i])
			}
			if months[i] != wantMonths[i] {
				t.Fatalf("row %d in month %s, want %s", i, months[i], wantMonths[i])
			}
		}
	})
	t.Run("manifest", func(t *testing.T) {
		b, err := os.ReadFile(filepath.Join(dir, export.ManifestName("north")))
		if err != nil {
			t.Fatal(err)
		}
		var back export.Manifest
		if err := json.Unmarshal(b, &back); err != nil {
			t.Fatal(err)
		}
		var sum int64
		for _, f := range back.Files {
			sum += f.Rows
			if _, err := os.Stat(filepath.Join(dir, filepath.FromSlash(f.Path))); err != nil {
				t.Errorf("manifest names %s: %v", f.Path, err)
			}
		}
		if sum != back.Rows || back.Kind != "events" || len(back.Files) < 2 {
			t.Errorf("manifest: %d files, rows %d (files sum %d), kind %s", len(back.Files), back.Rows, sum, back.Kind)
		}
	})
	t.Run("no temporary files", func(t *testing.T) {
		if tmp := temporaries(t, dir); len(tmp) > 0 {
			t.Errorf("left %v", tmp)
		}
	})
}

// equalJSON compares two values by their JSON form (times and pointers
// compare by value).
func equalJSON(tb testing.TB, a, b any) bool {
	tb.Helper()
	ja, err := json.Marshal(a)
	if err != nil {
		tb.Fatal(err)
	}
	jb, err := json.Marshal(b)
	if err != nil {
		tb.Fatal(err)
	}
	return string(ja) == string(jb)
}

func temporaries(tb testing.TB, dir string) []string {
	tb.Helper()
	var out []string
	err := filepath.WalkDir(dir, func(path string, d os.DirEntry, err error) error {
		if err == nil && strings.HasSuffix(path, ".tmp") {
			out = append(out, path)
		}
		return err
	})
	if err != nil {
		tb.Fatal(err)
	}
	return out
}

func TestChangesetsRoundTrip(t *testing.T) {
	ctx := context.Background()
	st := smallStore(t, 3)
	dir := t.TempDir()
	m, err := export.Changesets(ctx, st, dir, export.Options{Store: "north", MaxOpen: 2})
	if err != nil {
		t.Fatal(err)
	}
	want := map[int64]export.ChangesetRow{}
	wantMonth := map[int64]string{}
	err = st.ScanChangesets(ctx, func(c *osm.Changeset) error {
		row, month := export.ChangesetRowOf("north", c)
		want[row.ID], wantMonth[row.ID] = row, month
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	got, months := readDataset[export.ChangesetRow](t, dir, "north")
	if len(got) != len(want) || m.Rows != int64(len(want)) || len(want) < 100 {
		t.Fatalf("read %d rows, manifest %d, store %d changesets", len(got), m.Rows, len(want))
	}
	tagged := 0
	for i, row := range got {
		w, ok := want[row.ID]
		if !ok {
			t.Fatalf("changeset %d not in the store", row.ID)
		}
		if len(row.Tags) == 0 {
			row.Tags = nil
		}
		if !equalJSON(t, row, w) || months[i] != wantMonth[row.ID] {
			t.Fatalf("changeset %d: got %+v in %s, want %+v in %s", row.ID, row, months[i], w, wantMonth[row.ID])
		}
		if len(w.Tags) > 0 {
			tagged++
		}
		delete(want, row.ID)
	}
	if tagged == 0 {
		t.Error("no changeset with tags: the tags column is untested")
	}
}

// TestSeveralStores exports two stores into one dataset, then the first
// again with fewer rows per file: the other store's files stay and the
// first's earlier files are replaced.
func TestSeveralStores(t *testing.T) {
	ctx := context.Background()
	a, b := smallStore(t, 3), smallStore(t, 4)
	dir := t.TempDir()
	ma, err := export.Events(ctx, a, dir, export.Options{Store: "east"})
	if err != nil {
		t.Fatal(err)
	}
	mb, err := export.Events(ctx, b, dir, export.Options{Store: "west"})
	if err != nil {
		t.Fatal(err)
	}
	ma2, err := export.Events(ctx, a, dir, export.Options{Store: "east", RowsPerFile: 20})
	if err != nil {
		t.Fatal(err)
	}
	if len(ma2.Files) <= len(ma.Files) {
		t.Fatalf("re-export made %d files, first %d", len(ma2.Files), len(ma.Files))
	}
	east, _ := readDataset[export.EventRow](t, dir, "east")
	west, _ := readDataset[export.EventRow](t, dir, "west")
	if int64(len(east)) != ma.Rows || int64(len(west)) != mb.Rows {
		t.Errorf("east %d rows (want %d), west %d (want %d)", len(east), ma.Rows, len(west), mb.Rows)
	}
	all, err := filepath.Glob(filepath.Join(dir, "month=*", "*.parquet"))
	if err != nil {
		t.Fatal(err)
	}
	if len(all) != len(ma2.Files)+len(mb.Files) {
		t.Errorf("%d files in the dataset, manifests name %d", len(all), len(ma2.Files)+len(mb.Files))
	}
	for _, r := range west {
		if r.Store != "west" {
			t.Fatalf("west file holds a row of store %q", r.Store)
		}
	}
}

// failingSource stops the changeset scan after n records.
type failingSource struct {
	export.ChangesetSource
	n int
}

var errBroken = errors.New("broken source")

func (f failingSource) ScanChangesets(ctx context.Context, fn func(c *osm.Changeset) error) error {
	i := 0
	return f.ChangesetSource.ScanChangesets(ctx, func(c *osm.Changeset) error {
		if i++; i > f.n {
			return errBroken
		}
		return fn(c)
	})
}

func TestFailedExportLeavesNothing(t *testing.T) {
	ctx := context.Background()
	st := smallStore(t, 3)
	dir := t.TempDir()
	_, err := export.Changesets(ctx, failingSource{st, 50}, dir, export.Options{Store: "south"})
	if !errors.Is(err, errBroken) {
		t.Fatalf("err %v, want the source's", err)
	}
	if tmp := temporaries(t, dir); len(tmp) > 0 {
		t.Errorf("left %v", tmp)
	}
	files, _ := filepath.Glob(filepath.Join(dir, "month=*", "*.parquet"))
	if len(files) > 0 {
		t.Errorf("a failed export left %v", files)
	}
	if _, err := os.Stat(filepath.Join(dir, export.ManifestName("south"))); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("manifest of a failed export: %v", err)
	}
}

func TestBadStoreID(t *testing.T) {
	for _, id := range []string{"", "a-b", "../x", ".hidden", "a b"} {
		t.Run(id, func(t *testing.T) {
			_, err := export.Changesets(context.Background(), failingSource{}, t.TempDir(), export.Options{Store: id})
			if !errors.Is(err, export.ErrStoreID) {
				t.Errorf("err %v, want ErrStoreID", err)
			}
		})
	}
}
