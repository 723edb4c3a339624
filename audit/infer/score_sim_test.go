package infer

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// scoreSimResult counts a simulation study of the restricted score
// bootstrap: rejections of the true null at 5% and intervals covering it.
type scoreSimResult struct {
	reps, rejected, covered int
	wald                    int // rejections by the analytic CR1 Wald t against t(G−1), for comparison
	unbounded               int // intervals with an infinite end
	fitFailed               int // of which the fit failed while stepping outward
}

// scoreSimStudy draws reps invented panels (scoreSimPanel: g units, nt
// treated, T months, true log effect −0.2) and runs ScoreBootstrap at the
// true value with draws bootstrap draws and the given weights.
func scoreSimStudy(tb testing.TB, seed uint64, reps, g, nt, T, draws int, w ScoreWeights) scoreSimResult {
	tb.Helper()
	const beta = -0.2
	rng := rand.New(rand.NewPCG(seed, uint64(g*1000+nt)))
	ctx := context.Background()
	a := make([]float64, T)
	a[0] = 1
	opts := DefaultScoreOptions()
	opts.Draws, opts.Tol, opts.Weights = draws, 1e-3, w
	var r scoreSimResult
	for rep := range reps {
		p := scoreSimPanel(rng, g, nt, T, beta)
		est := scorePanelEstimate(tb, p)
		opts.Seed = uint64(rep + 1)
		res, err := ScoreBootstrap(ctx, p.fitter(), a, est, beta, opts)
		if err != nil {
			tb.Fatalf("rep %d: %v", rep, err)
		}
		r.reps++
		if res.P <= 0.05 {
			r.rejected++
		}
		if res.Lo <= beta && beta <= res.Hi {
			r.covered++
		}
		if math.IsInf(res.Lo, 0) || math.IsInf(res.Hi, 0) {
			r.unbounded++
		}
		if res.FitFailed {
			r.fitFailed++
		}
		crit := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(res.Clusters - 1)}.Quantile(0.975)
		if math.Abs(est-beta)/res.SE > crit {
			r.wald++
		}
	}
	return r
}

// scoreWilson returns the Wilson score interval for k successes in n trials
// at 95% (Wilson 1927, JASA 22; z = 1.959964).
func scoreWilson(k, n int) (lo, hi float64) {
	const z = 1.959963984540054
	p, nn := float64(k)/float64(n), float64(n)
	den := 1 + z*z/nn
	c := (p + z*z/(2*nn)) / den
	h := z * math.Sqrt(p*(1-p)/nn+z*z/(4*nn*nn)) / den
	return c - h, c + h
}

// TestScoreSimulationQuick: 100 invented panels with 8 treated of 40
// clusters. The restricted score bootstrap must hold its size: the Wilson
// interval of the rejection rate must reach down to 5% or below and must not
// lie entirely under 1% (a test that never rejects is useless), and
// coverage must agree with non-rejection. The full study is
// TestScoreSimulationValidate (build tag validate).
func TestScoreSimulationQuick(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	r := scoreSimStudy(t, 42, 100, 40, 8, 8, 299, ScoreWeightsAuto)
	lo, hi := scoreWilson(r.rejected, r.reps)
	clo, chi := scoreWilson(r.covered, r.reps)
	t.Logf("8 of 40 treated: size %d/%d [%.3f, %.3f], coverage %d/%d [%.3f, %.3f]", r.rejected, r.reps, lo, hi, r.covered, r.reps, clo, chi)
	if lo > 0.05 || hi < 0.01 {
		t.Errorf("rejection rate %d/%d, Wilson [%.3f, %.3f]: not a 5%% test", r.rejected, r.reps, lo, hi)
	}
	if d := r.covered - (r.reps - r.rejected); d < -2 || d > 2 {
		t.Errorf("coverage %d but non-rejections %d: interval and p-value disagree", r.covered, r.reps-r.rejected)
	}
}
