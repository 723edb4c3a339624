package infer

import (
	"context"
	"math/rand/v2"
	"testing"
)

// BenchmarkScoreBootstrap: one test and interval on an invented Poisson
// panel of 40 clusters (8 treated, 8 months), 999 draws, ends to 1e-6
// standard errors; reports restricted fits per run.
func BenchmarkScoreBootstrap(b *testing.B) {
	rng := rand.New(rand.NewPCG(1, 2))
	p := scoreSimPanel(rng, 40, 8, 8, -0.2)
	est := scorePanelEstimate(b, p)
	a := make([]float64, 8)
	a[0] = 1
	opts := DefaultScoreOptions()
	opts.Draws = 999
	ctx := context.Background()
	fits := 0
	b.ReportAllocs()
	for b.Loop() {
		r, err := ScoreBootstrap(ctx, p.fitter(), a, est, 0, opts)
		if err != nil {
			b.Fatal(err)
		}
		fits += r.Fits
	}
	b.ReportMetric(float64(fits)/float64(b.N), "fits/op")
}
