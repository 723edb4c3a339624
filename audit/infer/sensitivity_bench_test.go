package infer

import (
	"context"
	"testing"
)

// BenchmarkRelativeMagnitudes: the robust set at one M̄ for 3 leads and 2
// lags with the default options (1000 least-favourable draws, 60 grid
// points per cone).
func BenchmarkRelativeMagnitudes(b *testing.B) {
	es := rrTestStudy([]float64{0.02, -0.03, 0.01}, []float64{-0.25, -0.3}, 0.04)
	ctx := context.Background()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := RelativeMagnitudes(ctx, es, []float64{0.5, 0.5}, []float64{1}, DefaultRMOptions()); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkRMBreakdownValue: the breakdown value for the same study with
// the default options.
func BenchmarkRMBreakdownValue(b *testing.B) {
	es := rrTestStudy([]float64{0.02, -0.03, 0.01}, []float64{-0.25, -0.3}, 0.04)
	ctx := context.Background()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := RMBreakdownValue(ctx, es, []float64{0.5, 0.5}, DefaultRMOptions()); err != nil {
			b.Fatal(err)
		}
	}
}
