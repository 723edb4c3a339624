//go:build validate

package infer

import (
	"context"
	"fmt"
	"testing"
)

// TestRMSimulationValidate is the full coverage and false-claim study of
// the relative-magnitudes robust set on invented event studies
// (rrSimCase): 2000 worlds per row with an effect (coverage of θ at the
// true M̄, by the union of the cones' sets) and 2000 with none (the robust
// set at the true M̄ excludes zero: a false claim that the conclusion
// survives). Figures are logged with Wilson 95% intervals; a row fails when
// coverage's interval lies wholly under 93% or the false-claim rate's wholly
// over 7%. Run: go test -tags validate -run RMSimulationValidate -v ./audit/infer
func TestRMSimulationValidate(t *testing.T) {
	const reps = 2000
	hybrid := DefaultRMOptions()
	hybrid.LFDraws = 1000
	cond := hybrid
	cond.LFDraws = 0
	tests := []struct {
		name string
		c    rrSimCase
		opts RMOptions
	}{
		{"hybrid, 3 leads 2 lags, M̄ 1, one-step pre change", rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.01, bend: 1, kink: true}, hybrid},
		{"hybrid, 3 leads 2 lags, M̄ 2, one-step pre change", rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 2, tau: -0.2, sigma: 0.01, bend: 1, kink: true}, hybrid},
		{"hybrid, 4 leads 4 lags, M̄ 1, one-step pre change", rrSimCase{tp: 4, tq: 4, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.01, bend: 1, kink: true}, hybrid},
		{"hybrid, 3 leads 2 lags, M̄ 1, noisy (σ = slope)", rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.05, bend: 1, kink: true}, hybrid},
		{"hybrid, 3 leads 2 lags, M̄ 1, linear pre-trend", rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.01, bend: 1}, hybrid},
		{"hybrid, 3 leads 2 lags, M̄ 1, trend reverses", rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.01, bend: -1, kink: true}, hybrid},
		{"conditional, 3 leads 2 lags, M̄ 1, one-step pre change", rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.01, bend: 1, kink: true}, cond},
	}
	for i, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cov, _ := rrSimStudy(t, uint64(10+i), reps, tc.c, tc.opts)
			c0 := tc.c
			c0.tau = 0
			_, excl := rrSimStudy(t, uint64(50+i), reps, c0, tc.opts)
			clo, chi := scoreWilson(cov, reps)
			elo, ehi := scoreWilson(excl, reps)
			t.Logf("| %s | coverage %.3f [%.3f, %.3f] | false claims %.3f [%.3f, %.3f] |", tc.name,
				float64(cov)/reps, clo, chi, float64(excl)/reps, elo, ehi)
			if chi < 0.93 || elo > 0.07 {
				t.Errorf("coverage %d/%d, false claims %d/%d", cov, reps, excl, reps)
			}
		})
	}
	// the reported hull and the breakdown value on fewer worlds (each
	// needs the whole grid or a bisection in M̄)
	t.Run("hull coverage and breakdown size", func(t *testing.T) {
		const n = 300
		c := rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.01, bend: 1, kink: true}
		hull, claims := rrSimHullBreakdown(t, 99, n, c, hybrid)
		clo, chi := scoreWilson(hull, n)
		elo, ehi := scoreWilson(claims, n)
		t.Logf("| hull coverage at M̄ 1 | %.3f [%.3f, %.3f] | breakdown M̄* ≥ 1 with no effect | %.3f [%.3f, %.3f] |",
			float64(hull)/n, clo, chi, float64(claims)/n, elo, ehi)
		if chi < 0.93 || elo > 0.07 {
			t.Errorf("hull coverage %d/%d, breakdown claims %d/%d", hull, n, claims, n)
		}
	})
}

// rrSimHullBreakdown counts worlds whose reported hull at the true M̄
// holds θ, and no-effect worlds whose breakdown value reaches the true M̄.
func rrSimHullBreakdown(tb testing.TB, seed uint64, reps int, c rrSimCase, opts RMOptions) (hull, claims int) {
	tb.Helper()
	ctx := context.Background()
	draws := rrSimDraws(tb, seed, reps, c)
	c0 := c
	c0.tau = 0
	draws0 := rrSimDraws(tb, seed+1, reps, c0)
	l := make([]float64, c.tq)
	for j := range l {
		l[j] = 1 / float64(c.tq)
	}
	for i := range reps {
		ivs, err := RelativeMagnitudes(ctx, draws[i], l, []float64{c.mbar}, opts)
		if err != nil {
			tb.Fatal(err)
		}
		if ivs[0].Lo <= c.tau && c.tau <= ivs[0].Hi {
			hull++
		}
		b, err := RMBreakdownValue(ctx, draws0[i], l, opts)
		if err != nil {
			tb.Fatal(fmt.Errorf("breakdown: %w", err))
		}
		if b.Significant && b.MBar >= c.mbar {
			claims++
		}
	}
	return hull, claims
}
