package study_test

import (
	"context"
	"flag"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
)

var studyScale = flag.Float64("studyscale", 1, "activity scale of the simulated world BenchmarkBuildStudy reads")

// BenchmarkBuildStudy builds an import's panel from a classified store
// (invented world, -studyscale multiplies its size) beside a plain scan of the
// same events, the baseline the panel build is measured against (target: at
// most 2x the scan).
func BenchmarkBuildStudy(b *testing.B) {
	cfg := sim.DefaultConfig()
	cfg.Scale = *studyScale
	w := worldtest.Build(b, cfg)
	ctx := context.Background()
	var events int64
	if err := layers.ScanEvents(ctx, w.Store, time.Time{}, time.Time{}, func(*layers.Event) error { events++; return nil }); err != nil {
		b.Fatal(err)
	}
	b.Run("scan", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			n := 0
			if err := layers.ScanEvents(ctx, w.Store, time.Time{}, time.Time{}, func(*layers.Event) error { n++; return nil }); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(float64(events)*float64(b.N)/b.Elapsed().Seconds(), "events/s")
	})
	b.Run("study", func(b *testing.B) {
		b.ReportAllocs()
		for b.Loop() {
			if _, err := study.Build(ctx, w.Store, study.RefOf(&w.Episodes[0]), w.Units, study.Options{OtherImports: allChangesets(w.Episodes)}); err != nil {
				b.Fatal(err)
			}
		}
		b.ReportMetric(float64(events)*float64(b.N)/b.Elapsed().Seconds(), "events/s")
	})
}
