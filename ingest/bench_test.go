package ingest

import (
	"context"
	"os"
	"path/filepath"
	"syscall"
	"testing"
	"time"

	"github.com/loadwake/loadwake/ingest/osmfile"
)

// cpuTime returns the user plus system CPU time of the process so far (all
// goroutines), for benchmarks on a shared machine, where wall time depends on
// the neighbours.
func cpuTime(tb testing.TB) time.Duration {
	tb.Helper()
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		tb.Fatal(err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// decodeAll reads every item of the file at path and returns how many.
func decodeAll(tb testing.TB, path string) int64 {
	tb.Helper()
	r, err := osmfile.OpenFile(context.Background(), path, osmfile.ReadOptions{})
	if err != nil {
		tb.Fatal(err)
	}
	defer r.Close()
	var n int64
	for r.Scan() {
		if it := r.Item(); it.Object != nil || it.Changeset != nil {
			n++
		}
	}
	if err := r.Err(); err != nil {
		tb.Fatal(err)
	}
	return n
}

// BenchmarkDelaware sets decoding beside ingesting the Delaware extract
// (github.com/paulmach/osm v0.8.0 testdata, 798,658 objects): decode reads
// every item and stores nothing; ingest/bulk and ingest/transactional store
// them into a fresh on-disk store on either write path. Each reports
// objects/s of wall time and cpu-s/op, the process's user plus system CPU
// per pass (what to compare on a shared machine); the ingests also report
// cpu-x-decode, their CPU over that of a decode-only pass run before each
// ingest, outside the timer. The target is ingest/bulk at most 2.5
// cpu-x-decode.
func BenchmarkDelaware(b *testing.B) {
	path := osmModuleTestdata(b, "testdata/delaware-latest.osm.pbf")
	b.Run("decode", func(b *testing.B) {
		b.ReportAllocs()
		var objects int64
		var cpu time.Duration
		for b.Loop() {
			c0 := cpuTime(b)
			objects += decodeAll(b, path)
			cpu += cpuTime(b) - c0
		}
		b.ReportMetric(float64(objects)/b.Elapsed().Seconds(), "objects/s")
		b.ReportMetric(cpu.Seconds()/float64(b.N), "cpu-s/op")
	})
	for _, wp := range []struct {
		name string
		path WritePath
	}{{"ingest/bulk", WriteBulk}, {"ingest/transactional", WriteTransactional}} {
		b.Run(wp.name, func(b *testing.B) {
			b.ReportAllocs()
			var objects int64
			var cpu, decodeCPU time.Duration
			for b.Loop() {
				b.StopTimer()
				c0 := cpuTime(b)
				decodeAll(b, path)
				decodeCPU += cpuTime(b) - c0
				dir := b.TempDir()
				b.StartTimer()

				c0 = cpuTime(b)
				s, err := Open(dir, DefaultOptions())
				if err != nil {
					b.Fatal(err)
				}
				rep, err := Ingest(context.Background(), s, []string{path}, IngestOptions{Path: wp.path})
				if err != nil {
					b.Fatal(err)
				}
				if err := s.Close(); err != nil {
					b.Fatal(err)
				}
				cpu += cpuTime(b) - c0
				objects += rep.Files[0].Items
				b.StopTimer()
				os.RemoveAll(dir)
				b.StartTimer()
			}
			b.ReportMetric(float64(objects)/b.Elapsed().Seconds(), "objects/s")
			b.ReportMetric(cpu.Seconds()/float64(b.N), "cpu-s/op")
			b.ReportMetric(cpu.Seconds()/decodeCPU.Seconds(), "cpu-x-decode")
		})
	}
}

// BenchmarkIngestDelaware ingests the Delaware extract (github.com/paulmach/osm
// v0.8.0 testdata, 798,658 objects) into a fresh on-disk store and reports
// objects/s, to set beside BenchmarkDecodeDelaware. It also reports the store's
// size on disk per million versions after closing.
func BenchmarkIngestDelaware(b *testing.B) {
	path := osmModuleTestdata(b, "testdata/delaware-latest.osm.pbf")
	benchIngest(b, path, DefaultOptions())
}

// BenchmarkIngestDelawareUncompressed is BenchmarkIngestDelaware with block
// compression off, to measure what Snappy costs and saves.
func BenchmarkIngestDelawareUncompressed(b *testing.B) {
	path := osmModuleTestdata(b, "testdata/delaware-latest.osm.pbf")
	benchIngest(b, path, DefaultOptions().WithCompression(BlockUncompressed))
}

// BenchmarkIngestXMLHistory ingests the full history of relation 4017808
// (testdata/relation_4017808.osm, 1.06 MB, from github.com/paulmach/osm
// annotate/testdata) and reports MB/s of XML.
func BenchmarkIngestXMLHistory(b *testing.B) {
	benchIngest(b, filepath.Join("testdata", "relation_4017808.osm"), DefaultOptions())
}

func benchIngest(b *testing.B, path string, opts Options) {
	st, err := os.Stat(path)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.SetBytes(st.Size())
	ctx := context.Background()
	var objects, versions, diskBytes int64
	runs := int64(0)
	for b.Loop() {
		dir := b.TempDir()
		s, err := Open(dir, opts)
		if err != nil {
			b.Fatal(err)
		}
		rep, err := Ingest(ctx, s, []string{path}, IngestOptions{})
		if err != nil {
			b.Fatal(err)
		}
		objects += rep.Files[0].Items
		if err := s.Close(); err != nil {
			b.Fatal(err)
		}
		b.StopTimer()
		versions += rep.Files[0].Versions
		diskBytes += dirSize(b, dir)
		runs++
		os.RemoveAll(dir)
		b.StartTimer()
	}
	b.ReportMetric(float64(objects)/b.Elapsed().Seconds(), "objects/s")
	if versions > 0 {
		b.ReportMetric(float64(diskBytes)/float64(versions)*1e6/(1<<20), "MiB/Mversions")
	}
}

func dirSize(tb testing.TB, dir string) int64 {
	tb.Helper()
	var n int64
	err := filepath.Walk(dir, func(_ string, info os.FileInfo, err error) error {
		if err == nil && info.Mode().IsRegular() {
			n += info.Size()
		}
		return err
	})
	if err != nil {
		tb.Fatal(err)
	}
	return n
}
