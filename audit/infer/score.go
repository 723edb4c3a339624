package infer

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"
)

// The score bootstrap with the null imposed (Kline & Santos 2012, "A score
// based approach to wild bootstrap inference", Journal of Econometric Methods
// 1(1)), for one linear restriction a'β = b0 on the parameters of a Poisson
// (or any M-) estimator with clustered data.
//
// For each candidate b0 the model is fitted under the restriction; at the
// restricted estimate β̃ the cluster score sums s_g (∂ℓ_g/∂β) and the Hessian
// H (−∂²ℓ/∂β∂β', positive definite) give each cluster's contribution to one
// Newton step along a:
//
//	c_g = a'H⁻¹s_g,   t(b0) = Σ_g c_g / √(f Σ_g c_g²)
//
// t is the cluster-robust score (Lagrange multiplier) statistic in signed
// form: at b0 = a'β̂ it is zero and √(f Σ c_g²) is the CR1 standard error
// of a'β̂. The bootstrap perturbs the restricted scores with wild weights v_g
// and re-uses H (no refit per draw):
//
//	t*(v) = Σ_g v_g c_g / √(f Σ_g v_g² c_g²)
//
// and the p-value is the share of |t*| at least |t|. The interval is the set
// of b0 whose p-value exceeds 1 − level, found by bracketing outward from
// the estimate and bisection, with the same weight draws for every b0, so the
// p-value at any null and the interval come from one procedure.
//
// Small-sample factor: f = G/(G−1)·(N−1)/(N−K) when the fit reports N and K
// (R's sandwich::vcovCL type "HC1" for a glm, whose K counts every
// coefficient including fixed-effect dummies), G/(G−1) otherwise (Stata's
// factor for likelihood models). f scales t and every t* alike, so p-values
// and intervals do not depend on it; it only makes the reported statistic
// equal to the analytic CR1 score statistic.
//
// Weights: Rademacher ±1, or Webb's six-point ±√½, ±1, ±√(3/2) (Webb 2023,
// Canadian Journal of Economics 56(3); first as Queen's Economics Dept. WP
// 1315, 2014). Every distinct weight vector is enumerated when there are at
// most Draws of them (2^G Rademacher, 6^G Webb); the p-value is then exact
// for the enumerated distribution and deterministic. With Rademacher weights
// v_g² = 1, so t* is a sign change of the c_g and the test is the cluster
// sign-change randomization test of the restricted scores.

// ScoreWeights names a wild bootstrap weight distribution.
type ScoreWeights int

const (
	// ScoreWeightsAuto uses Webb weights with fewer than 12 clusters and
	// Rademacher weights otherwise (MacKinnon & Webb 2017, J. Applied
	// Econometrics 32(2), recommend Webb when Rademacher has too few
	// distinct draws).
	ScoreWeightsAuto ScoreWeights = iota
	// ScoreRademacher draws ±1 with probability ½ each.
	ScoreRademacher
	// ScoreWebb draws ±√½, ±1, ±√(3/2) with probability 1/6 each.
	ScoreWebb
)

// String names the weights as the method field of a report does.
func (w ScoreWeights) String() string {
	switch w {
	case ScoreRademacher:
		return "rademacher"
	case ScoreWebb:
		return "webb"
	default:
		return "auto"
	}
}

// ScoreFit is a model fitted under a restriction: the cluster score sums and
// the Hessian at the restricted estimate. Scores and Hessian may be those of
// every parameter or, for models with many fixed effects, those of the
// parameters of interest with the fixed effects partialled out (the
// efficient scores s_β − H_βα H_αα⁻¹ s_α and the Schur complement
// H_ββ − H_βα H_αα⁻¹ H_αβ): a'H⁻¹s_g is the same either way.
type ScoreFit struct {
	// Scores is G×k: row g holds cluster g's score sum ∂ℓ_g/∂β at the
	// restricted estimate. Every fit of one problem has the same G.
	Scores *mat.Dense
	// Hessian is k×k, minus the second derivative of the objective ℓ
	// (positive definite for a maximum), at the restricted estimate.
	Hessian *mat.SymDense
	// NObs and NParams, when NObs > 0, add the factor (N−1)/(N−K) to
	// G/(G−1); NParams counts every parameter, fixed effects included.
	NObs, NParams int
}

// ScoreFitter fits the model by maximising ℓ subject to a'β = b0 and
// returns the scores and Hessian there. It is called once per candidate b0;
// a must not be modified.
type ScoreFitter func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error)

// ScoreOptions configures ScoreBootstrap. The zero value is not useful; start
// from DefaultScoreOptions.
type ScoreOptions struct {
	Level   float64      // confidence level of the interval, test size 1 − Level
	Draws   int          // bootstrap draws; enumeration when the distinct vectors are at most Draws
	Weights ScoreWeights // weight distribution
	Seed    uint64       // seed of the PCG generator for random draws
	// Tol is the precision of the interval's ends, as a fraction of the
	// CR1 standard error at the estimate.
	Tol float64
	// MaxSE bounds the search for each end to MaxSE standard errors from
	// the estimate; an end not rejected there is reported as infinite.
	MaxSE float64
}

// DefaultScoreOptions returns level 0.95, 9999 draws, automatic weights,
// seed 1, ends to 1e-6 standard errors searched up to 50 standard errors.
func DefaultScoreOptions() ScoreOptions {
	return ScoreOptions{Level: 0.95, Draws: 9999, Weights: ScoreWeightsAuto, Seed: 1, Tol: 1e-6, MaxSE: 50}
}

// ScoreResult is the outcome of ScoreBootstrap.
type ScoreResult struct {
	Null float64 // the tested value of a'β
	Stat float64 // score statistic t at Null (signed, with the factor f)
	P    float64 // bootstrap p-value at Null
	// Lo and Hi bound the set of b0 not rejected at 1 − Level: the last
	// accepted values found on either side of the estimate, −Inf or +Inf
	// when nothing within MaxSE standard errors is rejected (common with
	// very few treated clusters: the bootstrap distribution then has few
	// distinct values and cannot reach below 1 − Level).
	Lo, Hi     float64
	SE         float64      // CR1 standard error of a'β̂ at the estimate
	Weights    ScoreWeights // the weights used (never auto)
	Draws      int          // bootstrap draws, or weight vectors enumerated
	Enumerated bool         // every weight vector was used: P is deterministic
	Clusters   int          // G
	Factor     float64      // the small-sample factor f at the estimate
	Fits       int          // restricted fits made
	// FitFailed is true when an end is infinite because the restricted
	// fit failed while stepping outward (typically far from the estimate,
	// where a Poisson fit's Hessian underflows) before any value was
	// rejected: an honest "unbounded as far as the model can be fitted".
	FitFailed bool
}

var (
	// ErrScoreInput marks unusable arguments or fits: mismatched sizes, a
	// Hessian that is not positive definite, fewer than 2 clusters.
	ErrScoreInput = errors.New("infer: score bootstrap input")
	// ErrScoreInterval marks an interval that cannot be found: the estimate
	// itself is rejected.
	ErrScoreInterval = errors.New("infer: score bootstrap interval")
)

// ScoreBootstrap tests a'β = null with the restricted score bootstrap and
// inverts the same test for an interval, starting from est = a'β̂, the
// unrestricted estimate. fit is called for null, est and each candidate end
// point (about 2·(log2(1/Tol)+5) times). ctx is checked before each fit.
func ScoreBootstrap(ctx context.Context, fit ScoreFitter, a []float64, est, null float64, opts ScoreOptions) (*ScoreResult, error) {
	if len(a) == 0 || !(opts.Level > 0 && opts.Level < 1) || opts.Draws < 1 || !(opts.Tol > 0) || !(opts.MaxSE >= 1) || !finiteScore(est) || !finiteScore(null) {
		return nil, fmt.Errorf("%w: need a restriction, 0 < level < 1, draws ≥ 1, tol > 0, max_se ≥ 1 and finite values", ErrScoreInput)
	}
	sb := &scoreBoot{ctx: ctx, fit: fit, a: a, opts: opts}
	alpha := 1 - opts.Level
	r := &ScoreResult{Null: null}
	c0, f0, err := sb.contributions(est)
	if err != nil {
		return nil, err
	}
	ss := 0.0
	for _, c := range c0 {
		ss += c * c
	}
	r.SE, r.Factor = math.Sqrt(f0*ss), f0
	if !(r.SE > 0) {
		return nil, fmt.Errorf("%w: every cluster score is zero at the estimate", ErrScoreInput)
	}
	sb.draw(len(c0))
	pEst := sb.pvalue(c0, f0)
	if !(pEst > alpha) {
		return nil, fmt.Errorf("%w: the estimate %g is rejected by its own test (p = %g)", ErrScoreInterval, est, pEst)
	}
	cn, fn, err := sb.contributions(null)
	if err != nil {
		return nil, err
	}
	r.Stat, r.P = scoreStat(cn, fn), sb.pvalue(cn, fn)
	for _, side := range []float64{-1, 1} {
		end, failed, err := sb.end(est, side, r.SE, alpha)
		if err != nil {
			return nil, err
		}
		r.FitFailed = r.FitFailed || failed
		if side < 0 {
			r.Lo = end
		} else {
			r.Hi = end
		}
	}
	r.Weights, r.Draws, r.Enumerated, r.Clusters, r.Fits = sb.weights, sb.b, sb.enumerated, sb.g, sb.fits
	return r, nil
}

// scoreBoot holds one problem's weight draws, shared by every b0.
type scoreBoot struct {
	ctx        context.Context
	fit        ScoreFitter
	a          []float64
	opts       ScoreOptions
	g, b       int
	v          []float64 // v[b*g+j]
	weights    ScoreWeights
	enumerated bool
	fits       int
}

// contributions fits at b0 and returns c_g = a'H⁻¹s_g and the factor f.
func (sb *scoreBoot) contributions(b0 float64) ([]float64, float64, error) {
	if err := sb.ctx.Err(); err != nil {
		return nil, 0, err
	}
	sb.fits++
	fr, err := sb.fit(sb.ctx, sb.a, b0)
	if err != nil {
		return nil, 0, fmt.Errorf("score bootstrap: restricted fit at %g: %w", b0, err)
	}
	c, f, err := scoreContrib(fr, sb.a)
	if err != nil {
		return nil, 0, fmt.Errorf("score bootstrap: fit at %g: %w", b0, err)
	}
	if sb.g != 0 && len(c) != sb.g {
		return nil, 0, fmt.Errorf("%w: fit at %g has %d clusters, earlier fits %d", ErrScoreInput, b0, len(c), sb.g)
	}
	return c, f, nil
}

// scoreContrib returns c_g = a'H⁻¹s_g for each cluster and the small-sample
// factor of fit fr.
func scoreContrib(fr ScoreFit, a []float64) ([]float64, float64, error) {
	if fr.Scores == nil || fr.Hessian == nil {
		return nil, 0, fmt.Errorf("%w: missing scores or Hessian", ErrScoreInput)
	}
	g, k := fr.Scores.Dims()
	if fr.Hessian.SymmetricDim() != k || len(a) != k {
		return nil, 0, fmt.Errorf("%w: scores have %d columns, Hessian %d, restriction %d", ErrScoreInput, k, fr.Hessian.SymmetricDim(), len(a))
	}
	if g < 2 {
		return nil, 0, fmt.Errorf("%w: %d clusters; need at least 2", ErrScoreInput, g)
	}
	var ch mat.Cholesky
	if !ch.Factorize(fr.Hessian) {
		return nil, 0, fmt.Errorf("%w: Hessian not positive definite", ErrScoreInput)
	}
	x := mat.NewVecDense(k, nil)
	if err := ch.SolveVecTo(x, mat.NewVecDense(k, a)); err != nil {
		return nil, 0, fmt.Errorf("%w: Hessian: %v", ErrScoreInput, err)
	}
	c := make([]float64, g)
	cv := mat.NewVecDense(g, c)
	cv.MulVec(fr.Scores, x)
	for _, v := range c {
		if !finiteScore(v) {
			return nil, 0, fmt.Errorf("%w: non-finite score", ErrScoreInput)
		}
	}
	f := float64(g) / float64(g-1)
	if fr.NObs > 0 {
		if fr.NObs <= fr.NParams {
			return nil, 0, fmt.Errorf("%w: %d observations for %d parameters", ErrScoreInput, fr.NObs, fr.NParams)
		}
		f *= float64(fr.NObs-1) / float64(fr.NObs-fr.NParams)
	}
	return c, f, nil
}

// scoreStat is t = Σc / √(f Σc²) (0 when every c is 0).
func scoreStat(c []float64, f float64) float64 {
	s, ss := 0.0, 0.0
	for _, v := range c {
		s += v
		ss += v * v
	}
	if ss == 0 {
		return 0
	}
	return s / math.Sqrt(f*ss)
}

// draw fixes the weight vectors for g clusters: every vector when there are
// at most Draws of them, else Draws random ones.
func (sb *scoreBoot) draw(g int) {
	sb.g = g
	w := sb.opts.Weights
	if w != ScoreRademacher && w != ScoreWebb {
		w = ScoreRademacher
		if g < 12 {
			w = ScoreWebb
		}
	}
	sb.weights = w
	points := scorePoints(w)
	// enumerate when len(points)^g ≤ Draws
	total, fits := 1, true
	for range g {
		total *= len(points)
		if total > sb.opts.Draws {
			fits = false
			break
		}
	}
	if fits {
		sb.enumerated, sb.b = true, total
		sb.v = make([]float64, total*g)
		for i := range total {
			r := i
			for j := range g {
				sb.v[i*g+j] = points[r%len(points)]
				r /= len(points)
			}
		}
		return
	}
	sb.b = sb.opts.Draws
	sb.v = make([]float64, sb.b*g)
	rng := rand.New(rand.NewPCG(sb.opts.Seed, 0x5c07e))
	for i := range sb.v {
		sb.v[i] = points[rng.IntN(len(points))]
	}
}

// scorePoints returns the support of the weight distribution w, each point
// equally likely.
func scorePoints(w ScoreWeights) []float64 {
	if w == ScoreWebb {
		return []float64{-math.Sqrt(1.5), -1, -math.Sqrt(0.5), math.Sqrt(0.5), 1, math.Sqrt(1.5)}
	}
	return []float64{-1, 1}
}

// pvalue is the share of draws with |t*| ≥ |t| (ties within 1e-10
// relative count as at least): exact over an enumeration, (1+hits)/(1+B)
// over random draws.
func (sb *scoreBoot) pvalue(c []float64, f float64) float64 {
	t := math.Abs(scoreStat(c, f)) * (1 - 1e-10)
	hits := 0
	for b := range sb.b {
		v := sb.v[b*sb.g : (b+1)*sb.g]
		s, ss := 0.0, 0.0
		for j, cj := range c {
			x := v[j] * cj
			s += x
			ss += x * x
		}
		ts := 0.0
		if ss > 0 {
			ts = math.Abs(s) / math.Sqrt(f*ss)
		}
		if ts >= t {
			hits++
		}
	}
	if sb.enumerated {
		return float64(hits) / float64(sb.b)
	}
	return float64(hits+1) / float64(sb.b+1)
}

// end finds the interval's end on one side of est: steps of se doubling up
// to MaxSE·se until a rejected b0, then bisection to Tol·se; it returns the
// last accepted value, or ±Inf when MaxSE·se is accepted or the fit fails
// while stepping outward (failed true; a cancelled ctx is still an error).
func (sb *scoreBoot) end(est, side, se, alpha float64) (float64, bool, error) {
	in, step := est, se
	var out float64
	for {
		step = min(step, sb.opts.MaxSE*se)
		b0 := est + side*step
		c, f, err := sb.contributions(b0)
		if err != nil {
			if sb.ctx.Err() != nil {
				return 0, false, err
			}
			return math.Inf(int(side)), true, nil
		}
		if sb.pvalue(c, f) <= alpha {
			out = b0
			break
		}
		if step >= sb.opts.MaxSE*se {
			return math.Inf(int(side)), false, nil
		}
		in = b0
		step *= 2
	}
	for math.Abs(out-in) > sb.opts.Tol*se {
		mid := (in + out) / 2
		c, f, err := sb.contributions(mid)
		if err != nil {
			return 0, false, err
		}
		if sb.pvalue(c, f) <= alpha {
			out = mid
		} else {
			in = mid
		}
	}
	return in, false, nil
}

func finiteScore(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
