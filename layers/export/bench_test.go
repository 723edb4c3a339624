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

// BenchmarkExport exports the events and the changeset records of an
// invented world to Parquet files; throughput in rows per second.
func BenchmarkExport(b *testing.B) {
	st := benchStore(b)
	ctx := context.Background()
	for _, kind := range []string{"events", "changesets"} {
		b.Run(kind, func(b *testing.B) {
			dir := b.TempDir()
			opts := export.Options{Store: "bench"}
			b.ReportAllocs()
			var rows int64
			for b.Loop() {
				var m export.Manifest
				var err error
				if kind == "events" {
					m, err = export.Events(ctx, st, dir, opts)
				} else {
					m, err = export.Changesets(ctx, st, dir, opts)
				}
				if err != nil {
					b.Fatal(err)
				}
				rows += m.Rows
			}
			b.ReportMetric(float64(rows)/b.Elapsed().Seconds(), kind+"/s")
		})
	}
}
