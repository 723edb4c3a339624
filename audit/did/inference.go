package did

import (
	"context"
	"fmt"
	"math/rand/v2"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
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
//     leads (robust.LeadTest with H).
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
const FewTreatedClusters = robust.FewTreatedClusters

// errSingular marks a design whose cross-product matrix cannot be inverted;
// the Poisson fit's sentinel, so one test catches both.
var errSingular = poisson.ErrSingular

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
	if !robust.Finite(w.Lower) || !robust.Finite(w.Upper) {
		e.lo, e.hi, e.noInterval = e.att, e.att, true
		e.note += "; restricted wild cluster bootstrap (null imposed): interval unbounded with so few treated clusters"
		return nil
	}
	e.lo, e.hi = w.Lower, w.Upper
	e.note += "; restricted wild cluster bootstrap (null imposed), interval by test inversion"
	return nil
}
