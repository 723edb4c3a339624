package sim_test

import (
	"context"
	"flag"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
)

// simScale sizes BenchmarkGenerate's world: 5 is some 1 million versions,
// 50 some 10 million (run that one with -benchtime 1x).
var (
	simScale  = flag.Float64("simscale", 5, "Scale of the world BenchmarkGenerate writes")
	simMonths = flag.Int("simmonths", 48, "study months of the world BenchmarkGenerate writes")
)

// BenchmarkGenerate writes a default 8×8 world of -simmonths months at -simscale and
// reports versions written per second.
func BenchmarkGenerate(b *testing.B) {
	cfg := sim.DefaultConfig()
	cfg.Scale, cfg.Months = *simScale, *simMonths
	b.ReportAllocs()
	var versions int64
	for b.Loop() {
		dir := b.TempDir()
		tr, err := sim.Generate(context.Background(), cfg, dir, false)
		if err != nil {
			b.Fatal(err)
		}
		versions += tr.Tallies.NodeVersions + tr.Tallies.WayVersions
	}
	b.ReportMetric(float64(versions)/b.Elapsed().Seconds(), "versions/s")
	b.ReportMetric(float64(versions)/float64(b.N), "versions/op")
}
