package infer

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"
)

// ErrRequest is returned (wrapped) for a test this package cannot run as
// asked: a restriction of the wrong length or with no non-zero entry, a
// confidence level outside (0, 1), a negative number of draws, or too few
// treated clusters for the requested correction.
var ErrRequest = errors.New("infer: bad test request")

// WeightScheme names the distribution of the wild bootstrap's cluster weights.
type WeightScheme int

const (
	// WeightsAuto chooses by the number of treated clusters (ChooseWeights).
	WeightsAuto WeightScheme = iota
	// Rademacher weights are ±1 with probability 1/2 each (Davidson &
	// Flachaire 2008; Cameron, Gelbach & Miller 2008).
	Rademacher
	// Webb weights take ±√(1/2), ±1, ±√(3/2) with probability 1/6 each
	// (Webb 2023, "Reworking wild bootstrap-based inference for clustered
	// errors", Canadian Journal of Economics 56(3); working paper 2014).
	Webb
)

// String returns "rademacher", "webb" or "auto".
func (s WeightScheme) String() string {
	switch s {
	case Rademacher:
		return "rademacher"
	case Webb:
		return "webb"
	}
	return "auto"
}

// WebbBelow is the number of clusters in the smaller arm (treated or
// untreated) below which ChooseWeights picks Webb's six-point weights.
//
// With G clusters Rademacher weights give at most 2^G distinct bootstrap
// samples, half of them mirror images; Webb (2023) recommends the
// six-point distribution when G is below about 12 (threshold from memory of
// that paper). With few treated clusters the bootstrap t statistic of a
// treatment coefficient is driven almost entirely by the weights of the G₁
// treated clusters, so it is G₁ (or the untreated count G₀ when that is the
// smaller) that limits the number of distinct values (MacKinnon & Webb 2017,
// "Wild bootstrap inference for wildly different cluster sizes", J. Applied
// Econometrics 32(2); MacKinnon & Webb 2018, "The wild
// bootstrap for few (treated) clusters", Econometrics Journal 21(2)).
const WebbBelow = 12

// ChooseWeights returns Webb when the smaller of the treated and untreated
// cluster counts is below WebbBelow, Rademacher otherwise.
func ChooseWeights(treatedClusters, clusters int) WeightScheme {
	if min(treatedClusters, clusters-treatedClusters) < WebbBelow {
		return Webb
	}
	return Rademacher
}

// Tail selects how a bootstrap p-value compares the statistic with its
// bootstrap distribution.
type Tail int

const (
	// Symmetric is the two-sided p-value P*(|t*| ≥ |t|).
	Symmetric Tail = iota
	// EqualTailed is 2·min(P*(t* ≤ t), P*(t* ≥ t)), capped at 1.
	EqualTailed
)

// WildOptions configures the restricted wild cluster bootstrap. The zero
// value asks for 999 draws, weights chosen by TreatedClusters, the symmetric
// p-value, a 95% interval and seed 0.
type WildOptions struct {
	// Draws is the number of bootstrap draws B (999 when 0). With Rademacher
	// weights and 2^G ≤ Draws every one of the 2^G sign vectors is used once
	// instead, which makes the result exact and deterministic.
	Draws int
	// Weights is the weight distribution; WeightsAuto uses ChooseWeights.
	Weights WeightScheme
	// TreatedClusters is the number of clusters holding treated observations,
	// used by WeightsAuto and by the F correction of Wald.
	TreatedClusters int
	// Tail selects the p-value, and so the interval, by symmetric or
	// equal-tailed comparison.
	Tail Tail
	// Level is the confidence level of the interval (0.95 when 0).
	Level float64
	// Seed seeds a PCG generator when Rand is nil.
	Seed uint64
	// Rand, when not nil, supplies the random weights instead of Seed. It is
	// used from the calling goroutine only.
	Rand *rand.Rand
}

func (o WildOptions) withDefaults(G int) (WildOptions, error) {
	if o.Draws == 0 {
		o.Draws = 999
	}
	if o.Level == 0 {
		o.Level = 0.95
	}
	switch {
	case o.Draws < 0:
		return o, fmt.Errorf("%w: %d bootstrap draws", ErrRequest, o.Draws)
	case !(o.Level > 0 && o.Level < 1):
		return o, fmt.Errorf("%w: confidence level %v not in (0, 1)", ErrRequest, o.Level)
	case o.Tail != Symmetric && o.Tail != EqualTailed:
		return o, fmt.Errorf("%w: unknown tail %d", ErrRequest, o.Tail)
	case o.TreatedClusters < 0 || o.TreatedClusters > G:
		return o, fmt.Errorf("%w: %d treated clusters out of %d", ErrRequest, o.TreatedClusters, G)
	}
	if o.Weights == WeightsAuto {
		if o.TreatedClusters == 0 {
			return o, fmt.Errorf("%w: automatic weights need the number of treated clusters", ErrRequest)
		}
		o.Weights = ChooseWeights(o.TreatedClusters, G)
	}
	if o.Weights != Rademacher && o.Weights != Webb {
		return o, fmt.Errorf("%w: unknown weight scheme %d", ErrRequest, o.Weights)
	}
	if o.Rand == nil {
		o.Rand = rand.New(rand.NewPCG(o.Seed, 0x9e3779b97f4a7c15))
	}
	return o, nil
}

// wcrEnumerates reports whether the draws are the full enumeration of the
// 2^G Rademacher sign vectors, and how many draws there are.
func wcrEnumerates(o WildOptions, G int) (bool, int) {
	if o.Weights == Rademacher && G < 31 && 1<<G <= o.Draws {
		return true, 1 << G
	}
	return false, o.Draws
}

// wcrWebb returns Webb's weight number i in [0, 6): −√(3/2), −1, −√(1/2),
// √(1/2), 1, √(3/2).
func wcrWebb(i int) float64 {
	m := math.Sqrt(float64(3-i%3) / 2)
	if i < 3 {
		return -m
	}
	return math.Sqrt(float64(i%3+1) / 2)
}

// wcrFill fills v (nb rows of G weights) with draws first, first+1, ...: the
// sign vectors with bit g of the draw number giving cluster g's sign when
// enumerating (draw 0 is all +1, the sample itself), random weights otherwise.
func wcrFill(v *mat.Dense, first int, enumerate bool, scheme WeightScheme, rng *rand.Rand) {
	nb, G := v.Dims()
	for b := range nb {
		row := v.RawRowView(b)
		switch {
		case enumerate:
			d := first + b
			for g := range G {
				row[g] = float64(1 - 2*((d>>g)&1))
			}
		case scheme == Webb:
			for g := range G {
				row[g] = wcrWebb(rng.IntN(6))
			}
		default:
			var bits uint64
			for g := range G {
				if g%64 == 0 {
					bits = rng.Uint64()
				}
				row[g] = float64(int(bits&1)*2 - 1)
				bits >>= 1
			}
		}
	}
}

// wcrChunk is how many bootstrap draws are processed together.
const wcrChunk = 256

// WildResult is the outcome of the restricted wild cluster bootstrap test of
// one linear restriction a'β = r. P and the interval come from the same
// bootstrap draws and the same Tail: the tested null r is inside
// (Lower, Upper) exactly when P > 1 − Level, and so is any other null r0
// with PAt(r0), unless the acceptance region is not an interval (see
// WildTest).
type WildResult struct {
	Estimate float64 // a'β̂
	Null     float64 // r
	SE       float64 // CR1 standard error of a'β̂
	T        float64 // (a'β̂ − r)/SE
	// P is the bootstrap p-value by the requested tail; PSymmetric and
	// PEqualTailed give both.
	P, PSymmetric, PEqualTailed float64
	// Lower and Upper bound the interval by test inversion at Level; an
	// infinite bound means no null value on that side is rejected.
	Lower, Upper, Level float64
	// TStar holds the bootstrap t statistics at the null r, one per draw.
	TStar      []float64
	Weights    WeightScheme
	Draws      int  // draws used (2^G when Enumerated)
	Enumerated bool // every Rademacher sign vector used once
	Tail       Tail

	n0, n1, q00, q01, q11 []float64
	factor                float64
}

// PAt returns the bootstrap p-value (by the result's Tail) of the null
// a'β = r0, reusing the draws: the restricted residuals, and with them each
// bootstrap t statistic, are affine in r0 (Roodman, MacKinnon, Nielsen &
// Webb 2019, "Fast and wild: bootstrap inference in Stata using boottest",
// Stata Journal 19(1)), so each evaluation costs O(B).
func (w *WildResult) PAt(r0 float64) float64 {
	sym, et := w.pBoth(r0)
	if w.Tail == EqualTailed {
		return et
	}
	return sym
}

// tstar returns draw b's bootstrap t statistic at δ = a'β̂ − r0.
func (w *WildResult) tstar(b int, delta float64) float64 {
	num := w.n0[b] + delta*w.n1[b]
	v := w.factor * (w.q00[b] + delta*(2*w.q01[b]+delta*w.q11[b]))
	if !(v > 0) {
		if num == 0 {
			return 0
		}
		return math.Copysign(math.Inf(1), num)
	}
	return num / math.Sqrt(v)
}

// wcrTol is the relative tolerance under which two t statistics count as
// tied (the draw of all +1 reproduces the sample's t up to rounding).
const wcrTol = 1e-9

func (w *WildResult) pBoth(r0 float64) (sym, et float64) {
	delta := w.Estimate - r0
	t := delta / w.SE
	tau := wcrTol * (math.Abs(t) + 1e-3)
	var abs, lo, hi int
	for b := range w.n0 {
		ts := w.tstar(b, delta)
		if math.Abs(ts) >= math.Abs(t)-tau {
			abs++
		}
		if ts <= t+tau {
			lo++
		}
		if ts >= t-tau {
			hi++
		}
	}
	B := float64(len(w.n0))
	return float64(abs) / B, math.Min(1, 2*float64(min(lo, hi))/B)
}

// WildTest runs the restricted wild cluster bootstrap-t (WCR: the null a'β = r
// is imposed on the bootstrap data-generating process; Cameron, Gelbach &
// Miller 2008; MacKinnon & Webb 2017) for one linear combination a'β with
// the CR1 variance, and inverts it for the interval.
//
// With β̃ the restricted estimate and ũ its residuals, draw b sets
// y* = Xβ̃ + v_g ũ for every observation of cluster g, refits, and forms
// t*_b = (a'β̂*_b − r)/SE*_b with the CR1 variance of the refit. Nothing is
// refitted: following Roodman et al. (2019, "Fast and wild", Stata Journal
// 19(1)) the per-cluster scores X_g'W_g ũ_g and blocks X_g'W_g X_g
// are computed once, after which each draw costs O(G·k) and each extra null
// value O(1) per draw. With Rademacher weights and 2^G ≤ Draws all 2^G sign
// vectors are enumerated (draw 0, all +1, reproduces the sample's t).
//
// p-values are the share of draws at least as extreme, B in the denominator,
// ties within a relative 1e-9 counted as extreme. The interval is the
// stretch of {r0 : PAt(r0) > 1 − Level} around the estimate, found from the
// estimate outward on each side: a grid of SE/4 steps to 10 SE, then
// doubling steps, locates the first rejected null, and bisection refines the
// crossing to 1e-12 relative. The acceptance region is almost always an
// interval; when it is not, the interval is made to agree with P at the
// tested null r: r lies inside exactly when P > 1 − Level.
// ctx is checked between chunks of draws.
func (f *OLS) WildTest(ctx context.Context, a []float64, r float64, o WildOptions) (*WildResult, error) {
	if err := f.checkRestriction(a); err != nil {
		return nil, err
	}
	if !wcrFinite(r) {
		return nil, fmt.Errorf("%w: null value %v", ErrRequest, r)
	}
	o, err := o.withDefaults(f.G)
	if err != nil {
		return nil, err
	}
	G, k := f.G, f.k
	// Aa, a'Aa and the per-cluster vectors of the method (see doc.go).
	aa := make([]float64, k)
	mat.NewVecDense(k, aa).MulVec(f.a, mat.NewVecDense(k, a))
	aAa := wcrDot(a, aa)
	if !(aAa > 0) {
		return nil, fmt.Errorf("%w: a'(X'WX)⁻¹a = %v", ErrRequest, aAa)
	}
	hv := mat.NewDense(G, k, nil) // rows H_g A a
	for g := range G {
		hv.RowView(g).(*mat.VecDense).MulVec(f.hess[g], mat.NewVecDense(k, aa))
	}
	var dm mat.Dense // rows d_g = A H_g A a
	dm.Mul(hv, f.a)
	em := mat.NewDense(G, k, nil) // rows e_g = H_g A a / a'Aa
	em.Scale(1/aAa, hv)
	c0 := make([]float64, G)
	c1 := make([]float64, G)
	ss := 0.0
	for g := range G {
		c0[g] = wcrDot(aa, f.scores.RawRowView(g))
		c1[g] = wcrDot(aa, em.RawRowView(g))
		ss += c0[g] * c0[g]
	}
	res := &WildResult{Estimate: wcrDot(a, f.Beta), Null: r, SE: math.Sqrt(f.factor * ss),
		Level: o.Level, Weights: o.Weights, Tail: o.Tail, factor: f.factor}
	if !(res.SE > 0) {
		return nil, fmt.Errorf("%w: CR1 standard error of a'β is %v", ErrRequest, res.SE)
	}
	res.T = (res.Estimate - r) / res.SE
	res.Enumerated, res.Draws = wcrEnumerates(o, G)
	B := res.Draws
	res.n0, res.n1 = make([]float64, B), make([]float64, B)
	res.q00, res.q01, res.q11 = make([]float64, B), make([]float64, B), make([]float64, B)
	c0v, c1v := mat.NewVecDense(G, c0), mat.NewVecDense(G, c1)
	for first := 0; first < B; first += wcrChunk {
		if err := ctx.Err(); err != nil {
			return nil, fmt.Errorf("infer: wild bootstrap after %d draws: %w", first, err)
		}
		nb := min(wcrChunk, B-first)
		v := mat.NewDense(nb, G, nil)
		wcrFill(v, first, res.Enumerated, o.Weights, o.Rand)
		mat.NewVecDense(nb, res.n0[first:first+nb]).MulVec(v, c0v)
		mat.NewVecDense(nb, res.n1[first:first+nb]).MulVec(v, c1v)
		var t0, t1, m0, m1 mat.Dense
		t0.Mul(v, f.scores) // Σ_g v_g ŝ_g per draw
		t1.Mul(v, em)       // Σ_g v_g e_g per draw
		m0.Mul(&t0, dm.T())
		m1.Mul(&t1, dm.T())
		for b := range nb {
			vr, r0, r1 := v.RawRowView(b), m0.RawRowView(b), m1.RawRowView(b)
			var q00, q01, q11 float64
			for h := range G {
				p0 := vr[h]*c0[h] - r0[h]
				p1 := vr[h]*c1[h] - r1[h]
				q00 += p0 * p0
				q01 += p0 * p1
				q11 += p1 * p1
			}
			res.q00[first+b], res.q01[first+b], res.q11[first+b] = q00, q01, q11
		}
	}
	delta := res.Estimate - r
	res.TStar = make([]float64, B)
	for b := range B {
		res.TStar[b] = res.tstar(b, delta)
	}
	res.PSymmetric, res.PEqualTailed = res.pBoth(r)
	res.P = res.PSymmetric
	if o.Tail == EqualTailed {
		res.P = res.PEqualTailed
	}
	alpha := 1 - o.Level
	res.Upper = res.invert(alpha, 1, 0)
	res.Lower = res.invert(alpha, -1, 0)
	res.agree(alpha)
	return res, nil
}

// agree makes the interval agree with P at the tested null r when the
// acceptance region is not an interval: a null r accepted beyond the first
// rejected value extends the interval to the end of r's accepted stretch; a
// null r rejected inside it (a rejected stretch narrower than the grid) moves
// that end to a crossing between the estimate and r.
func (w *WildResult) agree(alpha float64) {
	d := w.Null - w.Estimate
	if d == 0 {
		return
	}
	dir := math.Copysign(1, d)
	inside := w.Null > w.Lower && w.Null < w.Upper
	accepted := w.P > alpha
	var end float64
	switch {
	case accepted && !inside:
		end = w.invert(alpha, dir, math.Abs(d))
	case !accepted && inside:
		end = w.Estimate + dir*w.bisect(alpha, dir, 0, math.Abs(d))
	default:
		return
	}
	if dir > 0 {
		w.Upper = end
	} else {
		w.Lower = end
	}
}

// invert returns the end of the acceptance region {r0 : PAt(r0) > alpha}
// on side dir (+1 upper, −1 lower) of the estimate, searching outward from
// distance from (where the p-value is taken to exceed alpha).
func (w *WildResult) invert(alpha, dir, from float64) float64 {
	prev := from
	for j := 1; j <= 40+80; j++ {
		d := from + w.SE*float64(j)/4
		if j > 40 {
			d = from + w.SE*10*math.Ldexp(1, j-40)
		}
		if w.PAt(w.Estimate+dir*d) <= alpha {
			return w.Estimate + dir*w.bisect(alpha, dir, prev, d)
		}
		prev = d
	}
	return dir * math.Inf(1)
}

// bisect narrows [lo, hi] (distances from the estimate on side dir, the
// p-value above alpha at lo and at most alpha at hi) to a crossing, to a
// relative 1e-12, and returns its midpoint.
func (w *WildResult) bisect(alpha, dir, lo, hi float64) float64 {
	for range 200 {
		mid := (lo + hi) / 2
		if mid == lo || mid == hi || hi-lo <= 1e-12*(math.Abs(w.Estimate)+w.SE) {
			break
		}
		if w.PAt(w.Estimate+dir*mid) <= alpha {
			hi = mid
		} else {
			lo = mid
		}
	}
	return (lo + hi) / 2
}

// checkRestriction validates a restriction vector a for this fit.
func (f *OLS) checkRestriction(a []float64) error {
	if len(a) != f.k {
		return fmt.Errorf("%w: restriction has %d entries for %d coefficients", ErrRequest, len(a), f.k)
	}
	nz := false
	for j, v := range a {
		if !wcrFinite(v) {
			return fmt.Errorf("%w: restriction entry %d is %v", ErrRequest, j, v)
		}
		nz = nz || v != 0
	}
	if !nz {
		return fmt.Errorf("%w: restriction is all zero", ErrRequest)
	}
	return nil
}

// MinTreatedForInterval is the number of treated clusters from which
// ChooseMethod reports a wild bootstrap interval. Below it the restricted
// wild bootstrap is valid but so conservative that its intervals say little:
// in this package's simulation (G = 20 and 40 clusters of 1–12 units,
// heteroskedastic clustered errors, 1000 null panels per cell) WCR rejected
// 0.0–0.1% of true nulls at 5% with one or two treated clusters and 1.5–1.8%
// with three, against 3.3–3.5% with four; MacKinnon & Webb (2017, 2018)
// report the same collapse. The randomization test is exact there.
const MinTreatedForInterval = 4

// Method names the inference ChooseMethod recommends.
type Method int

const (
	// MethodRandomization: report the randomization test's p-value and no
	// interval (too few treated clusters for any interval to be reliable).
	MethodRandomization Method = iota
	// MethodWildWebb: restricted wild bootstrap with Webb weights.
	MethodWildWebb
	// MethodWildRademacher: restricted wild bootstrap with Rademacher weights.
	MethodWildRademacher
)

// String returns "randomization", "wild-webb" or "wild-rademacher".
func (m Method) String() string {
	switch m {
	case MethodWildWebb:
		return "wild-webb"
	case MethodWildRademacher:
		return "wild-rademacher"
	}
	return "randomization"
}

// ChooseMethod returns the inference for a design with the given numbers of
// treated and total clusters, by the smaller of the treated and untreated
// counts: randomization below MinTreatedForInterval, then the restricted
// wild bootstrap with the weights of ChooseWeights.
func ChooseMethod(treatedClusters, clusters int) Method {
	if min(treatedClusters, clusters-treatedClusters) < MinTreatedForInterval {
		return MethodRandomization
	}
	if ChooseWeights(treatedClusters, clusters) == Webb {
		return MethodWildWebb
	}
	return MethodWildRademacher
}
