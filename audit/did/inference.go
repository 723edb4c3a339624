package did

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/did/poisson"
	"github.com/loadwake/loadwake/audit/infer"
)

// Inference in this package, chosen by H, the smaller of the treated and
// untreated cluster counts (MacKinnon & Webb 2017, 2018: what limits
// few-cluster inference is the treated count, not the total):
//
//   - ppml-twfe (the headline): below infer.MinTreatedForInterval (4) no
//     interval; the p-value is a randomization test re-dealing the start
//     months over the eligible units. From 4 on, the score bootstrap with the
//     null imposed (Kline & Santos 2012; infer.ScoreBootstrap), weights by
//     infer.ChooseWeights, its interval by inverting the same test. Its
//     event study: CR1 bands with t(H−1) quantiles, and the joint test of its
//     leads (leadTest with H).
//   - cs-att: influence-function variance with each arm's own small-sample
//     factor (csVarianceFactors) and t(H−1) quantiles; the multiplier
//     bootstrap only when Options.Inference asks for it.
//   - twfe-linear and did-2x2: CR1 (Liang & Zeger 1986 with the factor
//     G/(G−1)·(N−1)/(N−K) of R's sandwich::vcovCL type "HC1") with normal
//     or t(G−1) quantiles; below FewTreatedClusters treated clusters the
//     restricted wild cluster bootstrap (null imposed; infer's
//     OLS.WildTest, Roodman, MacKinnon, Nielsen & Webb 2019), weights by
//     infer.ChooseWeights, its interval by inverting the same test
//     (setWildRestricted). twfe-linear's event-time bands stay CR1.
//
// Every random draw comes from a PCG generator seeded by Options.Seed.

// FewTreatedClusters is the number of treated clusters below which the
// linear robustness checks (did-2x2) switch from analytic to bootstrap
// inference. Thirty follows the rule of
// thumb in Cameron & Miller (2015, J. Human Resources, section VI) that
// cluster-robust variances are reliable from a few dozen clusters.
const FewTreatedClusters = 30

// errSingular marks a design whose cross-product matrix cannot be inverted;
// the Poisson fit's sentinel, so one test catches both.
var errSingular = poisson.ErrSingular

// webbWeights are Webb's six-point wild bootstrap weights ±√(1/2), ±1, ±√(3/2),
// each with probability 1/6 (Webb 2014, Queen's Economics Dept. WP 1315).
var webbWeights = [6]float64{-math.Sqrt(1.5), -1, -math.Sqrt(0.5), math.Sqrt(0.5), 1, math.Sqrt(1.5)}

// bootWeights fills v with one draw of wild bootstrap weights: Webb's six-point
// when webb is true, Rademacher ±1 otherwise (64 signs per random word).
func bootWeights(rng *rand.Rand, v []float64, webb bool) {
	if webb {
		for i := range v {
			v[i] = webbWeights[rng.IntN(6)]
		}
		return
	}
	var bits uint64
	for i := range v {
		if i%64 == 0 {
			bits = rng.Uint64()
		}
		v[i] = float64(int(bits&1)*2 - 1)
		bits >>= 1
	}
}

// bootDraws holds B draws of G cluster weights, shared by every aggregate of
// one outcome so that their bootstrap distributions are joint.
type bootDraws struct {
	B, G int
	v    []float64 // v[b*G+g]
}

func newBootDraws(rng *rand.Rand, B, G int) *bootDraws {
	_, webb := bootName(G)
	d := &bootDraws{B: B, G: G, v: make([]float64, B*G)}
	for b := range B {
		bootWeights(rng, d.v[b*G:(b+1)*G], webb)
	}
	return d
}

// bootName names a wild bootstrap weight scheme for the method field.
func bootName(clusters int) (string, bool) {
	if clusters < 12 {
		return "webb", true
	}
	return "rademacher", false
}

// sandwichCR1 returns bread·meat·bread with meat Σ_g s_g s_g' from the
// cluster score sums (scores[g*k+a]) and the CR1 factor
// G/(G-1)·(N-1)/(N-K), where N is the number of observations and K the number
// of parameters (including absorbed fixed effects, as R's glm would count them).
func sandwichCR1(bread *mat.SymDense, scores []float64, used []bool, k, nObs, kParams int) (*mat.SymDense, int) {
	meat := mat.NewSymDense(k, nil)
	G := 0
	for g, u := range used {
		if !u {
			continue
		}
		G++
		s := scores[g*k : g*k+k]
		for a := 0; a < k; a++ {
			for b := a; b < k; b++ {
				meat.SetSym(a, b, meat.At(a, b)+s[a]*s[b])
			}
		}
	}
	var tmp mat.Dense
	tmp.Mul(bread, meat)
	var v mat.Dense
	v.Mul(&tmp, bread)
	adj := 0.0
	if G > 1 && nObs > kParams {
		adj = float64(G) / float64(G-1) * float64(nObs-1) / float64(nObs-kParams)
	}
	out := mat.NewSymDense(k, nil)
	for a := 0; a < k; a++ {
		for b := a; b < k; b++ {
			out.SetSym(a, b, adj*(v.At(a, b)+v.At(b, a))/2)
		}
	}
	return out, G
}

// waldChi2 returns the Wald statistic b'V⁻¹b, its degrees of freedom and the
// chi-square p-value. ok is false when V cannot be inverted.
func waldChi2(b []float64, v *mat.SymDense) (stat float64, df int, p float64, ok bool) {
	k := len(b)
	if k == 0 {
		return 0, 0, 0, false
	}
	var inv mat.SymDense
	if err := poisson.InvSym(&inv, v); err != nil {
		return 0, k, 0, false
	}
	bv := mat.NewVecDense(k, b)
	stat = mat.Inner(bv, &inv, bv)
	p = distuv.ChiSquared{K: float64(k)}.Survival(stat)
	return stat, k, p, finite(stat) && finite(p)
}

// critical returns the two-sided 95% critical value: the normal quantile
// 1.959964 when the treated clusters are many, t(G-1) otherwise
// (Cameron & Miller 2015, section VI.C).
func critical(treatedClusters, clusters int) float64 {
	if treatedClusters >= FewTreatedClusters || clusters < 3 {
		return distuv.UnitNormal.Quantile(0.975)
	}
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(clusters - 1)}.Quantile(0.975)
}

// pTwoSided returns the two-sided p-value of z against the normal (treated
// clusters many) or t(G-1) distribution, matching critical.
func pTwoSided(z float64, treatedClusters, clusters int) float64 {
	if treatedClusters >= FewTreatedClusters || clusters < 3 {
		return 2 * distuv.UnitNormal.Survival(math.Abs(z))
	}
	return 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(clusters - 1)}.Survival(math.Abs(z))
}

// quantile returns the q-quantile of xs (sorted in place) by the type 7 rule
// (R's default).
func quantile(xs []float64, q float64) float64 {
	if len(xs) == 0 {
		return math.NaN()
	}
	sort.Float64s(xs)
	h := (float64(len(xs)) - 1) * q
	lo := math.Floor(h)
	i := int(lo)
	if i+1 >= len(xs) {
		return xs[len(xs)-1]
	}
	return xs[i] + (h-lo)*(xs[i+1]-xs[i])
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// analyticName names the analytic method: CR1 with normal or t(G-1) quantiles.
func analyticName(treatedClusters, clusters int) string {
	if treatedClusters >= FewTreatedClusters || clusters < 3 {
		return "analytic-cr1"
	}
	return "analytic-cr1-t(G-1)"
}

func addOuter(m *mat.SymDense, x []float64, w float64) {
	for a := range x {
		for b := a; b < len(x); b++ {
			m.SetSym(a, b, m.At(a, b)+w*x[a]*x[b])
		}
	}
}

// setWildRestricted sets e's p-value and interval from the restricted wild
// cluster bootstrap of a'β = 0 on design d (infer.OLS.WildTest: the null
// imposed, weights chosen by the tc treated clusters, the interval by
// inverting the same test, so p < 0.05 exactly when the interval excludes
// 0). A side the inversion leaves unbounded (too few treated clusters)
// leaves e without an interval, its p-value kept.
func (e *estimate) setWildRestricted(ctx context.Context, d infer.Design, a []float64, tc int, opts Options, rng *rand.Rand) error {
	f, err := infer.FitOLS(d)
	if err != nil {
		return fmt.Errorf("restricted wild bootstrap: %w", err)
	}
	w, err := f.WildTest(ctx, a, 0, infer.WildOptions{Draws: opts.Draws, TreatedClusters: min(tc, f.G), Rand: rng})
	if err != nil {
		return fmt.Errorf("restricted wild bootstrap: %w", err)
	}
	e.p = w.P
	e.method = fmt.Sprintf("wild-bootstrap-%s-%d", w.Weights, w.Draws)
	if !finite(w.Lower) || !finite(w.Upper) {
		e.lo, e.hi, e.noInterval = e.att, e.att, true
		e.note += "; restricted wild cluster bootstrap (null imposed): interval unbounded with so few treated clusters"
		return nil
	}
	e.lo, e.hi = w.Lower, w.Upper
	e.note += "; restricted wild cluster bootstrap (null imposed), interval by test inversion"
	return nil
}
