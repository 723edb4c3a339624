package infer

import (
	"context"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// rrSimCase is an invented event-study world for the relative-magnitudes
// simulations: leads with a linear pre-trend of slope per period, lags
// whose trend changes by mbar·slope per period (the edge of Δ^RM(M̄),
// where coverage is hardest), effect tau in every lag, estimates drawn
// from N(β, σ²·0.5^|i−j|).
type rrSimCase struct {
	tp, tq      int
	slope, mbar float64
	tau, sigma  float64
	// bend is the direction of the post-period trend change relative to
	// the pre-period one (+1 continues it, −1 reverses it).
	bend float64
	// kink puts the whole pre-period change into the last lead's step to
	// the reference period (δ_pre all −slope): the largest pre change is
	// then one step, not a maximum over equal ones, and its estimate is
	// not biased upward, the hardest case for coverage.
	kink bool
}

// truth returns β = τ + δ and θ = mean of τ_post.
func (c rrSimCase) truth() (pre, post []float64, theta float64) {
	pre = make([]float64, c.tp)
	for j := range c.tp {
		pre[j] = -c.slope * float64(c.tp-j) // δ rises by slope into the reference 0
		if c.kink {
			pre[j] = -c.slope
		}
	}
	post = make([]float64, c.tq)
	level := 0.0
	for j := range c.tq {
		level += c.bend * c.mbar * c.slope
		post[j] = c.tau + level
	}
	return pre, post, c.tau
}

// rrSimStudy counts, over reps draws, how often the robust set at the true
// M̄ keeps the true θ (coverage of the union of the cones' sets; the
// reported hull is wider) and how often it excludes zero (a false claim of
// robustness when θ = 0).
func rrSimStudy(tb testing.TB, seed uint64, reps int, c rrSimCase, opts RMOptions) (covered, excluded int) {
	tb.Helper()
	pre, post, theta := c.truth()
	base := rrTestStudy(pre, post, c.sigma)
	l := make([]float64, c.tq)
	for j := range l {
		l[j] = 1 / float64(c.tq)
	}
	tmpl, err := newRR(base, l, opts)
	if err != nil {
		tb.Fatal(err)
	}
	ctx := context.Background()
	for _, es := range rrSimDraws(tb, seed, reps, c) {
		r, err := newRR(es, l, opts)
		if err != nil {
			tb.Fatal(err)
		}
		r.lfMem = tmpl.lfMem // same covariance and draws: the critical values are shared
		keep, err := r.kept(ctx, c.mbar, theta)
		if err != nil {
			tb.Fatal(err)
		}
		if keep {
			covered++
		}
		keep0, err := r.kept(ctx, c.mbar, 0)
		if err != nil {
			tb.Fatal(err)
		}
		if !keep0 {
			excluded++
		}
	}
	return covered, excluded
}

// rrSimDraws draws reps event studies of world c.
func rrSimDraws(tb testing.TB, seed uint64, reps int, c rrSimCase) []EventStudy {
	tb.Helper()
	pre, post, _ := c.truth()
	n := c.tp + c.tq
	base := rrTestStudy(pre, post, c.sigma)
	var ch mat.Cholesky
	if !ch.Factorize(base.Cov) {
		tb.Fatal("covariance")
	}
	var u mat.TriDense
	ch.UTo(&u)
	rng := rand.New(rand.NewPCG(seed, 77))
	z := mat.NewVecDense(n, nil)
	var e mat.VecDense
	out := make([]EventStudy, reps)
	for i := range reps {
		for j := range n {
			z.SetVec(j, rng.NormFloat64())
		}
		e.MulVec(u.T(), z) // N(0, U'U)
		est := append(append([]float64(nil), pre...), post...)
		for j := range n {
			est[j] += e.AtVec(j)
		}
		out[i] = EventStudy{Pre: est[:c.tp], Post: est[c.tp:], Cov: base.Cov}
	}
	return out
}

// TestRMSimulationQuick: 300 worlds at the edge of Δ^RM(1) with an effect
// (coverage of θ) and 300 with none (false claims that the effect survives
// M̄ = 1), the pre-period change in one step (the hardest case: with equal
// steps the estimated largest change is biased upward and coverage nears
// 100%). Coverage's Wilson interval must reach 95% and the false-claim
// rate's must reach down to 5%. The full study is TestRMSimulationValidate
// (build tag validate).
func TestRMSimulationQuick(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	opts := DefaultRMOptions()
	opts.LFDraws = 300
	c := rrSimCase{tp: 3, tq: 2, slope: 0.05, mbar: 1, tau: -0.2, sigma: 0.01, bend: 1, kink: true}
	cov, _ := rrSimStudy(t, 1, 300, c, opts)
	c.tau = 0
	_, excl := rrSimStudy(t, 2, 300, c, opts)
	clo, chi := scoreWilson(cov, 300)
	elo, ehi := scoreWilson(excl, 300)
	t.Logf("coverage %d/300 [%.3f, %.3f]; false claims %d/300 [%.3f, %.3f]", cov, clo, chi, excl, elo, ehi)
	if chi < 0.95 {
		t.Errorf("coverage %d/300, Wilson [%.3f, %.3f] below 95%%", cov, clo, chi)
	}
	if elo > 0.05 {
		t.Errorf("false claims %d/300, Wilson [%.3f, %.3f] above 5%%", excl, elo, ehi)
	}
}
