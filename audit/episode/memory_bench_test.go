package episode

import (
	"bufio"
	"bytes"
	"context"
	"encoding/binary"
	"fmt"
	"io"
	"os"
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
// (audit/sim) of growing size, versions in an in-memory store and the
// derived area in files (as an on-disk store keeps it), and reports the peak
// live heap of a first Detect (counting every version) per changeset: with
// the counters spilled to disk it falls as the worlds grow (memory flat in
// the number of changesets once there are more than the spill size).
// spill=1024 shows the bound at sizes a benchmark can build quickly.
func BenchmarkDetectMemory(b *testing.B) {
	for _, scale := range []float64{1, 2, 4} {
		for _, spill := range []int{0, 1024} {
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
						*fileDerived
					}{st, &fileDerived{dir: b.TempDir()}}
					peak = max(peak, peakHeap(func() {
						if _, err := Detect(ctx, src, r, Options{spill: spill}); err != nil {
							b.Fatal(err)
						}
					}))
				}
				b.ReportMetric(float64(changesets), "changesets")
				b.ReportMetric(float64(peak)/float64(changesets), "peak-B/changeset")
			})
		}
	}
}

// fileDerived is a derived area on disk, as a store keeps it: each
// PutDerived call writes one run file (Detect writes each spill sorted by
// key), ScanDerived merges the runs holding one record per run in memory.
type fileDerived struct {
	dir  string
	runs []string
}

func (d *fileDerived) PutDerived(_ context.Context, fill func(put func(k, v []byte) error) error) error {
	name := filepath.Join(d.dir, fmt.Sprintf("run-%05d", len(d.runs)))
	f, err := os.Create(name)
	if err != nil {
		return err
	}
	w := bufio.NewWriter(f)
	var prev []byte
	err = fill(func(k, v []byte) error {
		if prev != nil && bytes.Compare(k, prev) <= 0 {
			return fmt.Errorf("fileDerived: keys out of order")
		}
		prev = append(prev[:0], k...)
		w.Write(binary.AppendUvarint(nil, uint64(len(k))))
		w.Write(k)
		w.Write(binary.AppendUvarint(nil, uint64(len(v))))
		_, err := w.Write(v)
		return err
	})
	if err == nil {
		err = w.Flush()
	}
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	d.runs = append(d.runs, name)
	return err
}

type runReader struct {
	r    *bufio.Reader
	k, v []byte
	ok   bool
}

func (r *runReader) next() {
	read := func() []byte {
		n, err := binary.ReadUvarint(r.r)
		if err != nil {
			return nil
		}
		b := make([]byte, n)
		if _, err := io.ReadFull(r.r, b); err != nil {
			return nil
		}
		return b
	}
	r.k = read()
	r.v = read()
	r.ok = r.k != nil
}

func (d *fileDerived) ScanDerived(_ context.Context, prefix []byte, fn func(k, v []byte) error) error {
	var rs []*runReader
	for _, name := range d.runs {
		f, err := os.Open(name)
		if err != nil {
			return err
		}
		defer f.Close()
		r := &runReader{r: bufio.NewReader(f)}
		r.next()
		rs = append(rs, r)
	}
	for {
		var best *runReader
		for _, r := range rs {
			if r.ok && (best == nil || bytes.Compare(r.k, best.k) < 0) {
				best = r
			}
		}
		if best == nil {
			return nil
		}
		if bytes.HasPrefix(best.k, prefix) {
			if err := fn(best.k, best.v); err != nil {
				return err
			}
		}
		best.next()
	}
}

func (d *fileDerived) GetDerived(ctx context.Context, key []byte) (v []byte, ok bool, err error) {
	err = d.ScanDerived(ctx, key, func(k, val []byte) error {
		if bytes.Equal(k, key) {
			v, ok = bytes.Clone(val), true
		}
		return nil
	})
	return v, ok, err
}

func (d *fileDerived) DropDerived(context.Context, []byte) error {
	for _, r := range d.runs {
		os.Remove(r)
	}
	d.runs = nil
	return nil
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
