package infer

import (
	"context"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// wcrBenchDesign is a seeded invented design of n rows, k regressors
// (intercept, treatment dummy of the first fifth of the clusters, k−2
// normal covariates) and G clusters of equal size.
func wcrBenchDesign(tb testing.TB, n, k, G int) Design {
	tb.Helper()
	rng := rand.New(rand.NewPCG(1, 2))
	x := mat.NewDense(n, k, nil)
	y := make([]float64, n)
	cl := make([]int, n)
	shock := make([]float64, G)
	for g := range shock {
		shock[g] = rng.NormFloat64()
	}
	for i := range n {
		g := i * G / n
		cl[i] = g
		x.Set(i, 0, 1)
		if g < G/5 {
			x.Set(i, 1, 1)
		}
		for j := 2; j < k; j++ {
			x.Set(i, j, rng.NormFloat64())
		}
		y[i] = 0.1*x.At(i, 2) + shock[g] + rng.NormFloat64()
	}
	return Design{X: x, Y: y, Cluster: cl}
}

// BenchmarkWildTest times the restricted wild bootstrap of one coefficient
// with its interval by test inversion: 999 Webb draws, G = 50, N = 5000,
// k = 20 (the fit is made once outside the loop).
func BenchmarkWildTest(b *testing.B) {
	d := wcrBenchDesign(b, 5000, 20, 50)
	f, err := FitOLS(d)
	if err != nil {
		b.Fatal(err)
	}
	a := make([]float64, 20)
	a[1] = 1
	ctx := context.Background()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := f.WildTest(ctx, a, 0, WildOptions{Draws: 999, Weights: Webb, Seed: 1}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(999*float64(b.N)/b.Elapsed().Seconds(), "draws/s")
}

// BenchmarkFitOLS times the fit with the per-cluster pieces the bootstrap
// reuses (N = 5000, k = 20, G = 50).
func BenchmarkFitOLS(b *testing.B) {
	d := wcrBenchDesign(b, 5000, 20, 50)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := FitOLS(d); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(5000*float64(b.N)/b.Elapsed().Seconds(), "rows/s")
}

// BenchmarkWildWald times the bootstrap of a joint test of four
// restrictions: 999 Webb draws, G = 50, N = 5000, k = 20.
func BenchmarkWildWald(b *testing.B) {
	d := wcrBenchDesign(b, 5000, 20, 50)
	f, err := FitOLS(d)
	if err != nil {
		b.Fatal(err)
	}
	R := mat.NewDense(4, 20, nil)
	for j := range 4 {
		R.Set(j, 1+j, 1)
	}
	ctx := context.Background()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := f.WildWald(ctx, R, nil, WildOptions{Draws: 999, Weights: Webb, Seed: 1}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(999*float64(b.N)/b.Elapsed().Seconds(), "draws/s")
}
