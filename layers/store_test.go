package layers

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/osm"
)

// *ingest.Store meets the interfaces layers declares.
var (
	_ Source        = (*ingest.Store)(nil)
	_ DerivedReader = (*ingest.Store)(nil)
)

// ingested returns a store holding the given files, in memory or, when dir is
// not "", on disk.
func ingested(tb testing.TB, dir string, paths ...string) *ingest.Store {
	tb.Helper()
	var st *ingest.Store
	var err error
	if dir == "" {
		st, err = ingest.OpenInMemory(ingest.DefaultOptions())
	} else {
		st, err = ingest.Open(dir, ingest.DefaultOptions())
	}
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { st.Close() })
	if _, err := ingest.Ingest(context.Background(), st, paths, ingest.IngestOptions{}); err != nil {
		tb.Fatal(err)
	}
	return st
}

func eventStrings(tb testing.TB, src DerivedReader) []string {
	tb.Helper()
	var out []string
	err := ScanEvents(context.Background(), src, time.Time{}, time.Time{}, func(e *Event) error {
		out = append(out, fmt.Sprintf("%+v", *e))
		return nil
	})
	if err != nil {
		tb.Fatal(err)
	}
	return out
}

// TestStoreMatchesMemory runs the pass on real histories (osm module
// testdata) ingested into the Badger store, in memory and on disk (where the
// events go through the store's sorted bulk write), with one, two and three
// classifying goroutines, and on the in-memory fake; all must store the same
// events, and so must a forced second pass on disk (which drops the first's
// events and writes again over the store's earlier writes).
func TestStoreMatchesMemory(t *testing.T) {
	for _, file := range []string{"annotate/testdata/way_6394949.osm", "annotate/testdata/relation_4017808.osm"} {
		t.Run(filepath.Base(file), func(t *testing.T) {
			path := osmTestdata(t, file)
			mem := newMemSource(t, readOSMXML(t, path)...)
			memSum := runPass(t, mem)
			want := eventStrings(t, mem)
			same := func(t *testing.T, what string, st *ingest.Store) {
				t.Helper()
				got := eventStrings(t, st)
				if len(got) != len(want) {
					t.Fatalf("%s: store has %d events, fake %d", what, len(got), len(want))
				}
				for i := range want {
					if got[i] != want[i] {
						t.Errorf("%s: event %d\nstore %s\n fake %s", what, i, got[i], want[i])
						break
					}
				}
			}
			for _, c := range []struct {
				workers int
				disk    bool
			}{{1, false}, {2, false}, {3, false}, {1, true}, {3, true}} {
				dir := ""
				if c.disk {
					dir = filepath.Join(t.TempDir(), "store")
				}
				workers := c.workers
				st := ingested(t, dir, path)
				what := fmt.Sprintf("workers %d, disk %v", workers, c.disk)
				sum, err := Run(context.Background(), st, rules.Default(), Options{Workers: workers, BatchSize: 100, chunk: 5})
				if err != nil {
					t.Fatal(err)
				}
				same(t, what, st)
				if c.disk {
					if _, err := Run(context.Background(), st, rules.Default(), Options{Workers: workers, Force: true}); err != nil {
						t.Fatal(err)
					}
					same(t, what+", forced again", st)
				}
				if sum.Fingerprint != memSum.Fingerprint || sum.WaysMissingNodes != memSum.WaysMissingNodes {
					t.Errorf("workers %d: summary %+v, fake %+v", workers, sum, memSum)
				}
				stored, err := Summarize(context.Background(), st)
				if err != nil || stored.Fingerprint != sum.Fingerprint || stored.Events["geometry"] != sum.Events["geometry"] {
					t.Errorf("Summarize = %+v, %v; Run returned %+v", stored, err, sum)
				}
				again, err := Run(context.Background(), st, rules.Default(), Options{})
				if err != nil || !again.Skipped {
					t.Errorf("rerun on the store: skipped %v, err %v", again.Skipped, err)
				}
			}
		})
	}
}

// delawareDir ingests the Delaware extract (osm module testdata) into a store
// under b.TempDir() and closes it, so its compactions are over; benchmarks
// open copies of it.
func delawareDir(b *testing.B) string {
	b.Helper()
	dir := filepath.Join(b.TempDir(), "delaware")
	st, err := ingest.Open(dir, ingest.DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	if _, err := ingest.Ingest(context.Background(), st, []string{osmTestdata(b, "testdata/delaware-latest.osm.pbf")}, ingest.IngestOptions{}); err != nil {
		b.Fatal(err)
	}
	if err := st.Close(); err != nil {
		b.Fatal(err)
	}
	return dir
}

// openCopy opens a fresh copy of the store in dir.
func openCopy(b *testing.B, dir string) *ingest.Store {
	b.Helper()
	dst := filepath.Join(b.TempDir(), "copy")
	if err := os.CopyFS(dst, os.DirFS(dir)); err != nil {
		b.Fatal(err)
	}
	st, err := ingest.Open(dst, ingest.DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	return st
}

// BenchmarkScanDelaware is the baseline of BenchmarkClassifyDelaware: a plain
// scan of every stored version, nodes, ways then relations.
func BenchmarkScanDelaware(b *testing.B) {
	st := openCopy(b, delawareDir(b))
	defer st.Close()
	warm(b, st)
	ctx := context.Background()
	b.ReportAllocs()
	var n int64
	cpu := cpuTime(b)
	for b.Loop() {
		n = 0
		for _, t := range scanTypes {
			if err := st.ScanVersions(ctx, t, func(osm.Object) error { n++; return nil }); err != nil {
				b.Fatal(err)
			}
		}
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "versions/s")
	b.ReportMetric((cpuTime(b)-cpu)/float64(b.N), "cpu-s/op")
}

// cpuTime returns the user and system CPU seconds the process has used, all
// goroutines included (Badger's compactions too). On a machine shared with
// other work it varies less than wall time, so the benchmarks report it per
// op beside ns/op.
func cpuTime(b *testing.B) float64 {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		b.Fatal(err)
	}
	return float64(ru.Utime.Nano()+ru.Stime.Nano()) / 1e9
}

// BenchmarkClassifyDelaware runs the whole classification pass on the same
// store as a first classification: scan, classify, place ways, write events.
// Each iteration works on a fresh copy of the ingested store, made with the
// timer stopped.
func BenchmarkClassifyDelaware(b *testing.B) {
	benchClassify(b, false)
}

// warm scans every version once, filling Badger's block cache and the page
// cache as BenchmarkScanDelaware's earlier iterations do for later ones.
func warm(b *testing.B, st *ingest.Store) {
	for _, t := range scanTypes {
		if err := st.ScanVersions(context.Background(), t, func(osm.Object) error { return nil }); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkReclassifyDelaware is a forced rerun on an already classified
// store: the pass drops its earlier records first (Badger's prefix drop
// flushes and compacts) and writes them again.
func BenchmarkReclassifyDelaware(b *testing.B) {
	benchClassify(b, true)
}

func benchClassify(b *testing.B, again bool) {
	dir := delawareDir(b)
	ctx := context.Background()
	r := rules.Default()
	var st *ingest.Store
	if again {
		st = openCopy(b, dir)
		defer st.Close()
		if _, err := Run(ctx, st, r, Options{}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportAllocs()
	var sum Summary
	var cpu float64 // CPU seconds in the timed part
	for b.Loop() {
		if !again {
			b.StopTimer()
			st = openCopy(b, dir)
			warm(b, st) // as warm as the baseline's store
			b.StartTimer()
		}
		c0 := cpuTime(b)
		var err error
		if sum, err = Run(ctx, st, r, Options{Force: true}); err != nil {
			b.Fatal(err)
		}
		cpu += cpuTime(b) - c0
		if !again {
			b.StopTimer()
			if err := st.Close(); err != nil {
				b.Fatal(err)
			}
			b.StartTimer()
		}
	}
	var events, versions int64
	for _, n := range sum.Events {
		events += n
	}
	for _, n := range sum.Versions {
		versions += n
	}
	b.ReportMetric(float64(events)*float64(b.N)/b.Elapsed().Seconds(), "events/s")
	b.ReportMetric(float64(versions)*float64(b.N)/b.Elapsed().Seconds(), "versions/s")
	b.ReportMetric(cpu/float64(b.N), "cpu-s/op")
}

// BenchmarkClassifyHistory classifies a real history with moves (relation
// 2714790 with every version of its members, osm module testdata) in an
// in-memory store; it includes writing the node→way index, which a history
// needs as soon as a classless vertex moves. Baseline: BenchmarkScanHistory.
func BenchmarkClassifyHistory(b *testing.B) {
	st := ingested(b, "", osmTestdata(b, "annotate/testdata/relation_2714790.osm"))
	ctx := context.Background()
	r := rules.Default()
	b.ReportAllocs()
	var sum Summary
	for b.Loop() {
		var err error
		if sum, err = Run(ctx, st, r, Options{Force: true}); err != nil {
			b.Fatal(err)
		}
	}
	var events int64
	for _, n := range sum.Events {
		events += n
	}
	b.ReportMetric(float64(events)*float64(b.N)/b.Elapsed().Seconds(), "events/s")
}

// BenchmarkScanHistory is the plain scan baseline of BenchmarkClassifyHistory.
func BenchmarkScanHistory(b *testing.B) {
	st := ingested(b, "", osmTestdata(b, "annotate/testdata/relation_2714790.osm"))
	ctx := context.Background()
	b.ReportAllocs()
	var n int64
	for b.Loop() {
		n = 0
		for _, t := range scanTypes {
			if err := st.ScanVersions(ctx, t, func(osm.Object) error { n++; return nil }); err != nil {
				b.Fatal(err)
			}
		}
	}
	b.ReportMetric(float64(n)*float64(b.N)/b.Elapsed().Seconds(), "versions/s")
}
