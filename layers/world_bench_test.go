package layers

import (
	"context"
	"flag"
	"os"
	"path/filepath"
	"runtime"
	"runtime/debug"
	"runtime/metrics"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// Flags of BenchmarkClassifyWorld. Scale 1 is some 200,000 versions, 5 some
// 1 million, 50 some 10 million (audit/sim's DefaultConfig).
var (
	worldScales = flag.String("worldscales", "1,5", "comma-separated audit/sim scales of the worlds BenchmarkClassifyWorld classifies")
	worldDir    = flag.String("worlddir", "", "folder keeping BenchmarkClassifyWorld's ingested worlds between runs (default: made afresh under the test's temp dir)")
)

// BenchmarkClassifyWorld runs the whole classification pass on simulated
// worlds of several sizes (audit/sim, invented data), each iteration on a
// fresh copy of the ingested store made with the timer stopped. Per-version
// cost should not grow with the world: ns/version and cpu-ns/version are the
// figures to compare across sizes; peak-heap-B is the largest live heap
// sampled during the pass (runtime/metrics, every 10 ms) and peak-rss-B the
// process's peak resident set during the pass (VmHWM, reset before each
// pass; Linux only, else not reported), the test binary included.
func BenchmarkClassifyWorld(b *testing.B) {
	if testing.Short() {
		b.Skip("generates and ingests simulated worlds of 0.2M and 1M versions (minutes); not in -short")
	}
	for _, s := range strings.Split(*worldScales, ",") {
		scale, err := strconv.ParseFloat(strings.TrimSpace(s), 64)
		if err != nil {
			b.Fatalf("-worldscales: %v", err)
		}
		b.Run("scale="+strings.TrimSpace(s), func(b *testing.B) {
			dir := worldStore(b, scale)
			ctx := context.Background()
			r := rules.Default()
			b.ReportAllocs()
			var sum Summary
			var cpu float64
			var peak, rss uint64
			for b.Loop() {
				b.StopTimer()
				st := openCopy(b, dir)
				warm(b, st)
				runtime.GC()
				debug.FreeOSMemory()
				resetPeakRSS()
				stop := sampleHeap(&peak)
				b.StartTimer()
				c0 := cpuTime(b)
				if sum, err = Run(ctx, st, r, Options{Force: true}); err != nil {
					b.Fatal(err)
				}
				cpu += cpuTime(b) - c0
				b.StopTimer()
				stop()
				if n, ok := peakRSS(); ok {
					rss = max(rss, n)
				}
				if err := st.Close(); err != nil {
					b.Fatal(err)
				}
				b.StartTimer()
			}
			var versions int64
			for _, n := range sum.Versions {
				versions += n
			}
			b.ReportMetric(float64(versions), "versions")
			b.ReportMetric(float64(versions)*float64(b.N)/b.Elapsed().Seconds(), "versions/s")
			b.ReportMetric(float64(b.Elapsed().Nanoseconds())/float64(versions)/float64(b.N), "ns/version")
			b.ReportMetric(cpu*1e9/float64(versions)/float64(b.N), "cpu-ns/version")
			b.ReportMetric(float64(peak), "peak-heap-B")
			if rss > 0 {
				b.ReportMetric(float64(rss), "peak-rss-B")
			}
		})
	}
}

// worldStore returns the folder of a closed store holding the simulated world
// of the given scale, generating and ingesting it unless -worlddir already
// has it.
func worldStore(b *testing.B, scale float64) string {
	b.Helper()
	root := *worldDir
	if root == "" {
		root = b.TempDir()
	}
	name := "scale-" + strconv.FormatFloat(scale, 'g', -1, 64)
	dir := filepath.Join(root, name, "store")
	done := filepath.Join(root, name, "ingested")
	if _, err := os.Stat(done); err == nil {
		return dir
	}
	cfg := sim.DefaultConfig()
	cfg.Scale = scale
	world := filepath.Join(root, name, "world")
	ctx := context.Background()
	if _, err := sim.Generate(ctx, cfg, world, true); err != nil {
		b.Fatal(err)
	}
	if err := os.RemoveAll(dir); err != nil {
		b.Fatal(err)
	}
	st, err := ingest.Open(dir, ingest.DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	paths := []string{filepath.Join(world, sim.HistoryFile), filepath.Join(world, sim.ChangesetsFile)}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		b.Fatal(err)
	}
	if err := st.Close(); err != nil {
		b.Fatal(err)
	}
	if err := os.WriteFile(done, nil, 0o644); err != nil {
		b.Fatal(err)
	}
	return dir
}

// sampleHeap records the largest heap in use (objects and unused spans kept by
// the runtime) into *peak every 10 ms until the returned stop is called.
func sampleHeap(peak *uint64) (stop func()) {
	names := []string{"/memory/classes/heap/objects:bytes", "/memory/classes/heap/unused:bytes"}
	samples := make([]metrics.Sample, len(names))
	for i, n := range names {
		samples[i].Name = n
	}
	read := func() {
		metrics.Read(samples)
		var n uint64
		for _, s := range samples {
			if s.Value.Kind() == metrics.KindUint64 {
				n += s.Value.Uint64()
			}
		}
		*peak = max(*peak, n)
	}
	quit := make(chan struct{})
	var wg sync.WaitGroup
	wg.Go(func() {
		t := time.NewTicker(10 * time.Millisecond)
		defer t.Stop()
		for {
			select {
			case <-quit:
				read()
				return
			case <-t.C:
				read()
			}
		}
	})
	return func() { close(quit); wg.Wait() }
}

// resetPeakRSS resets the process's peak resident set (Linux: writing 5 to
// /proc/self/clear_refs resets VmHWM to the current resident set).
func resetPeakRSS() {
	os.WriteFile("/proc/self/clear_refs", []byte("5"), 0)
}

// peakRSS returns the process's peak resident set since the last
// resetPeakRSS (VmHWM in /proc/self/status).
func peakRSS() (uint64, bool) {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0, false
	}
	for _, line := range strings.Split(string(b), "\n") {
		if rest, ok := strings.CutPrefix(line, "VmHWM:"); ok {
			kb, err := strconv.ParseUint(strings.TrimSpace(strings.TrimSuffix(strings.TrimSpace(rest), "kB")), 10, 64)
			return kb << 10, err == nil
		}
	}
	return 0, false
}
