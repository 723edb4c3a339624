package episode

import (
	"context"
	"fmt"
	"path/filepath"
	"runtime"
	"sync"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// peakHeap runs fn while measuring the live heap (after a collection) every
// 10 ms and returns the largest growth over the heap before fn.
func peakHeap(fn func()) uint64 {
	runtime.GC()
	var ms runtime.MemStats
	runtime.ReadMemStats(&ms)
	base, peak := ms.HeapAlloc, ms.HeapAlloc
	var mu sync.Mutex
	done := make(chan struct{})
	var wg sync.WaitGroup
	wg.Go(func() {
		t := time.NewTicker(10 * time.Millisecond)
		defer t.Stop()
		var s runtime.MemStats
		for {
			select {
			case <-done:
				return
			case <-t.C:
				runtime.GC()
				runtime.ReadMemStats(&s)
				mu.Lock()
				peak = max(peak, s.HeapAlloc)
				mu.Unlock()
			}
		}
	})
	fn()
	close(done)
	wg.Wait()
	return peak - base
}

// BenchmarkDetectMemory counts import changesets in invented worlds
// (audit/sim) of growing size, in an in-memory store, and reports the peak
// live heap of a first Detect (counting every version) per changeset: with
// the counters spilled to the store it falls as the worlds grow (memory flat
// in the number of changesets once there are more than the spill size).
// spill=4096 shows the bound at sizes a benchmark can build quickly.
func BenchmarkDetectMemory(b *testing.B) {
	for _, scale := range []float64{1, 2, 4} {
		for _, spill := range []int{0, 4096} {
			b.Run(fmt.Sprintf("scale=%g/spill=%d", scale, spill), func(b *testing.B) {
				st, changesets := benchWorld(b, scale)
				ctx := context.Background()
				r := rules.Default()
				b.ReportAllocs()
				var peak uint64
				for b.Loop() {
					// A fresh derived area each time: the counting run.
					src := struct {
						Source
						*memDerivedCounting
					}{st, &memDerivedCounting{memDerived: newMemDerived()}}
					grown := peakHeap(func() {
						if _, err := Detect(ctx, src, r, Options{spill: spill}); err != nil {
							b.Fatal(err)
						}
					})
					peak = max(peak, grown-min(grown, src.stored))
				}
				b.ReportMetric(float64(changesets), "changesets")
				b.ReportMetric(float64(peak)/float64(changesets), "peak-B/changeset")
			})
		}
	}
}

// memDerivedCounting is an in-memory derived area that counts the bytes
// stored, which a store keeps on disk: the benchmark takes them off the
// peak (the map's own overhead stays counted, so the figure is an upper bound).
type memDerivedCounting struct {
	*memDerived
	stored uint64
}

func (d *memDerivedCounting) PutDerived(ctx context.Context, fill func(put func(k, v []byte) error) error) error {
	return d.memDerived.PutDerived(ctx, func(put func(k, v []byte) error) error {
		return fill(func(k, v []byte) error {
			d.stored += uint64(len(k) + len(v))
			return put(k, v)
		})
	})
}

func benchWorld(b *testing.B, scale float64) (*ingest.Store, int64) {
	b.Helper()
	ctx := context.Background()
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months = 4, 4, 24
	cfg.Scale = scale
	cfg.Treated, cfg.Waves = 4, 2
	dir := b.TempDir()
	if _, err := sim.Generate(ctx, cfg, dir, false); err != nil {
		b.Fatal(err)
	}
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(func() { st.Close() })
	paths := []string{filepath.Join(dir, sim.ChangesetsFile), filepath.Join(dir, sim.HistoryFile)}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		b.Fatal(err)
	}
	stats, err := st.Stats(ctx)
	if err != nil {
		b.Fatal(err)
	}
	return st, stats.Changesets
}
