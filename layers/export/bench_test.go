package export_test

import (
	"context"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers/export"
)

// benchStore is an invented world (audit/sim) of 4×4 districts over 24
// months, ingested and classified in an in-memory store.
func benchStore(b *testing.B) *ingest.Store {
	b.Helper()
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months = 4, 4, 24
	cfg.Treated, cfg.Waves = 4, 2
	st := buildWorld(b, cfg)
	b.Cleanup(func() { st.Close() })
	return st
}

// BenchmarkEvents exports the events of an invented world to Parquet files;
// throughput in events per second.
func BenchmarkEvents(b *testing.B) {
	st := benchStore(b)
	ctx := context.Background()
	dir := b.TempDir()
	b.ReportAllocs()
	var rows int64
	for b.Loop() {
		m, err := export.Events(ctx, st, dir, export.Options{Store: "bench"})
		if err != nil {
			b.Fatal(err)
		}
		rows += m.Rows
	}
	b.ReportMetric(float64(rows)/b.Elapsed().Seconds(), "events/s")
}

// BenchmarkChangesets exports the same world's changeset records;
// throughput in changesets per second.
func BenchmarkChangesets(b *testing.B) {
	st := benchStore(b)
	ctx := context.Background()
	dir := b.TempDir()
	b.ReportAllocs()
	var rows int64
	for b.Loop() {
		m, err := export.Changesets(ctx, st, dir, export.Options{Store: "bench"})
		if err != nil {
			b.Fatal(err)
		}
		rows += m.Rows
	}
	b.ReportMetric(float64(rows)/b.Elapsed().Seconds(), "changesets/s")
}
