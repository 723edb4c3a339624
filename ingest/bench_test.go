package ingest

import (
	"context"
	"os"
	"path/filepath"
	"testing"
)

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
