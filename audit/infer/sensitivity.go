package infer

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize/convex/lp"
	"gonum.org/v1/gonum/stat/distuv"
)

// Sensitivity of an event-study conclusion to departures from parallel
// trends: the relative-magnitudes restriction of Rambachan & Roth (2023, "A
// more credible approach to parallel trends", Review of Economic Studies
// 90(5)).
//
// The event-study coefficients are β = τ + δ: the effect τ (zero before the
// start) plus the bias δ from differing trends. With the reference period
// normalised (δ_0 = 0 between the last lead and the first lag), Δ^RM(M̄)
// allows every change of δ from one period to the next after the start to
// be at most M̄ times the largest such change before it:
//
//	|δ_{t+1} − δ_t| ≤ M̄ · max_{s<0} |δ_{s+1} − δ_s|   for t ≥ 0.
//
// The target θ = l'τ_post (for example the mean of the lags) is then only
// partly identified. Inference follows the paper's: Δ^RM(M̄) is the union
// over the pre-period change s that is largest and its sign of polyhedral
// cones
//
//	Δ_{s,±} = {δ: ±(δ_{s+1} − δ_s) ≥ |δ_{r+1} − δ_r| for every pre r,
//	              M̄·±(δ_{s+1} − δ_s) ≥ |δ_{t+1} − δ_t| for every post t},
//
// each cone is tested with the conditional-least-favourable hybrid test of
// Andrews, Roth & Pakes (2023, "Inference for linear conditional moment
// inequalities", Review of Economic Studies 90(6)), and the robust
// confidence set is the union of the cones' sets: θ̄ is kept when some cone
// does not reject it. Each cone's test has size at most α under its own null
// and the true δ lies in at least one cone, so the union covers θ with
// probability at least 1 − α.
//
// The test of a cone Aδ ≤ 0 at θ̄: with τ_post = Γ⁻¹(θ̄, τ̃) (Γ's first row l'),
// the moments Y = Aβ̂ − A_post Γ⁻¹e₁θ̄ must satisfy E[Y] − Xτ̃ ≤ 0 for some
// nuisance τ̃, X = A_post Γ⁻¹[·, 2:]. The statistic is
// η̂ = min_{τ̃} max_j (Y_j − X_jτ̃)/σ_j, found by its dual linear program
// max γ'Y s.t. γ ≥ 0, X'γ = 0, σ'γ = 1. Given the optimal vertex γ̂ and
// the part of Y independent of γ̂'Y, η̂ is normal with mean γ̂'E[Y] ≤ 0
// under the null and variance γ̂'Σ_Yγ̂, truncated to the interval [V^lo,
// V^up] of values for which γ̂ stays optimal; the ends come in closed form
// from the reduced costs of γ̂'s basis when the vertex is non-degenerate,
// otherwise by bisection on the dual program's value (both checked against
// an enumeration of the dual polytope's vertices). A γ̂ with γ̂'Σ_Yγ̂ = 0
// makes η̂ = γ̂'E[Y] exactly, and the test rejects when η̂ > 0. The hybrid
// first rejects when η̂
// exceeds the least-favourable critical value c_LF (the 1 − κ quantile of
// η̂ when E[Y] = 0, κ = α/10, by simulation), then applies the conditional
// test at level (α − κ)/(1 − κ) with V^up cut at c_LF (c_LF is simulated
// only where the decision depends on it; see reject). With LFDraws = 0 the
// plain conditional test at level α is used.
//
// The robust set of each cone is found on a grid of θ̄ (GridPoints over the
// identified set at β̂ widened by 4 standard errors of l'β̂_post each side,
// widened again while an end is kept) and its outermost crossings refined by
// bisection; the reported interval is the hull of the union. The breakdown
// value M̄* is the largest M̄ at which every cone rejects θ̄ = 0, found by
// bisection on M̄: this assumes the robust set grows with M̄, as the cones
// do (Δ_{s,±}(M̄) are nested in M̄), though the finite-sample tests need not
// be exactly monotone.
//
// No worked example of the paper could be reproduced: its applications'
// event-study estimates ship with the authors' R package, which no Debian
// package carries. The checks are brute-force computations instead (see
// the tests) and simulations of coverage.

// EventStudy is an event study's estimates with the reference period
// normalised to zero: the leads before it, oldest first, and the lags after
// it, with the covariance of (Pre, Post) stacked in that order.
type EventStudy struct {
	Pre  []float64     // leads, oldest first, ending just before the reference period
	Post []float64     // lags, from the first period after the reference
	Cov  *mat.SymDense // (len(Pre)+len(Post))² covariance
}

// RMOptions configures the relative-magnitudes analysis. Start from
// DefaultRMOptions.
type RMOptions struct {
	Alpha      float64 // size of each test; the robust set has level 1 − Alpha
	LFDraws    int     // draws for the least-favourable critical value; 0 for the conditional test alone
	Seed       uint64  // PCG seed of those draws
	GridPoints int     // grid of θ̄ per cone before refinement
	MaxMBar    float64 // largest M̄ the breakdown search tries
}

// DefaultRMOptions returns α = 0.05, 1000 least-favourable draws, seed 1,
// 60 grid points and M̄ up to 20.
func DefaultRMOptions() RMOptions {
	return RMOptions{Alpha: 0.05, LFDraws: 1000, Seed: 1, GridPoints: 60, MaxMBar: 20}
}

// RMInterval is the analysis at one M̄.
type RMInterval struct {
	MBar float64
	// Lo and Hi bound the robust confidence set (the hull of the cones'
	// sets); both NaN when every θ̄ is rejected (the data contradict the
	// restriction).
	Lo, Hi float64
	// IDLo and IDHi bound the identified set of θ taking β̂ as the truth.
	IDLo, IDHi float64
}

// RMBreakdown is the breakdown value of a conclusion that θ ≠ 0.
type RMBreakdown struct {
	// MBar is the largest M̄ at which the robust set excludes zero, to
	// 0.005; 0 when it includes zero already at M̄ = 0.
	MBar float64
	// Significant is false when zero is kept at M̄ = 0 (no conclusion to
	// break).
	Significant bool
	// Capped is true when zero is still excluded at MaxMBar.
	Capped bool
}

var (
	// ErrRMInput marks an unusable event study or target.
	ErrRMInput = errors.New("infer: relative magnitudes input")
	// ErrRMLP marks a linear program the solver could not finish.
	ErrRMLP = errors.New("infer: relative magnitudes linear program")
)

// RelativeMagnitudes returns the robust confidence set of θ = l'τ_post at
// each M̄ in mbars (non-negative), with the identified set at the point
// estimates. ctx is checked per M̄ and per cone.
func RelativeMagnitudes(ctx context.Context, es EventStudy, l []float64, mbars []float64, opts RMOptions) ([]RMInterval, error) {
	rr, err := newRR(es, l, opts)
	if err != nil {
		return nil, err
	}
	out := make([]RMInterval, 0, len(mbars))
	for _, mb := range mbars {
		if !(mb >= 0) || math.IsInf(mb, 0) {
			return nil, fmt.Errorf("%w: M̄ = %g; need a finite value ≥ 0", ErrRMInput, mb)
		}
		iv, err := rr.interval(ctx, mb)
		if err != nil {
			return nil, err
		}
		out = append(out, iv)
	}
	return out, nil
}

// RMBreakdownValue returns the largest M̄ (up to opts.MaxMBar) at which the
// robust confidence set of θ = l'τ_post excludes zero.
func RMBreakdownValue(ctx context.Context, es EventStudy, l []float64, opts RMOptions) (RMBreakdown, error) {
	rr, err := newRR(es, l, opts)
	if err != nil {
		return RMBreakdown{}, err
	}
	if !(opts.MaxMBar > 0) {
		return RMBreakdown{}, fmt.Errorf("%w: MaxMBar %g", ErrRMInput, opts.MaxMBar)
	}
	excl := func(mb float64) (bool, error) {
		kept, err := rr.kept(ctx, mb, 0)
		return !kept, err
	}
	ok, err := excl(0)
	if err != nil || !ok {
		return RMBreakdown{}, err
	}
	ok, err = excl(opts.MaxMBar)
	if err != nil {
		return RMBreakdown{}, err
	}
	if ok {
		return RMBreakdown{MBar: opts.MaxMBar, Significant: true, Capped: true}, nil
	}
	lo, hi := 0.0, opts.MaxMBar
	for hi-lo > 0.005 {
		mid := (lo + hi) / 2
		ok, err := excl(mid)
		if err != nil {
			return RMBreakdown{}, err
		}
		if ok {
			lo = mid
		} else {
			hi = mid
		}
	}
	return RMBreakdown{MBar: lo, Significant: true}, nil
}

// Sentence says in plain words how far the conclusion holds. effect names
// the estimated change as a noun ("drop", "rise"); before and after name the
// periods ("pre-import", "post-import").
func (b RMBreakdown) Sentence(effect, before, after string) string {
	switch {
	case !b.Significant:
		return fmt.Sprintf("the %s is not distinguishable from no change even if %s trends stayed exactly parallel", effect, after)
	case b.Capped:
		return fmt.Sprintf("the %s holds even if %s trends diverged %s times the largest %s change", effect, after, rrTimes(b.MBar), before)
	case b.MBar < 0.005:
		return fmt.Sprintf("the %s holds only if %s trends stayed exactly parallel: any divergence undoes it", effect, after)
	}
	return fmt.Sprintf("the %s holds unless %s trends diverged more than %s times the largest %s change", effect, after, rrTimes(b.MBar), before)
}

// rrTimes formats a multiple with two significant digits.
func rrTimes(x float64) string {
	if x >= 10 {
		return fmt.Sprintf("%.0f", x)
	}
	return fmt.Sprintf("%.2g", x)
}

// RMIdentifiedSet returns the bounds of θ = l'τ_post over Δ^RM(M̄) when the
// event-study coefficients are known to be (pre, post): the union over the
// cones of the linear programs max and min l'(post − δ_post) subject to
// the cone's constraints with δ_pre = pre.
func RMIdentifiedSet(pre, post, l []float64, mbar float64) (lo, hi float64, err error) {
	if len(pre) == 0 || len(post) == 0 || len(l) != len(post) || !(mbar >= 0) {
		return 0, 0, fmt.Errorf("%w: %d leads, %d lags, target of %d, M̄ %g", ErrRMInput, len(pre), len(post), len(l), mbar)
	}
	lo, hi = math.Inf(1), math.Inf(-1)
	lb := 0.0
	for j := range post {
		lb += l[j] * post[j]
	}
	tp, tq := len(pre), len(post)
	for _, cone := range rrCones(tp, tq, mbar) {
		// A_post δ_post ≤ −A_pre δ_pre: δ_post = p − q, slack w; standard
		// form rows A_post p − A_post q + w = rhs.
		m := len(cone)
		A := mat.NewDense(m, 2*tq+m, nil)
		rhs := make([]float64, m)
		for i, row := range cone {
			r := 0.0
			for j := range tp {
				r -= row[j] * pre[j]
			}
			rhs[i] = r
			for j := range tq {
				A.Set(i, j, row[tp+j])
				A.Set(i, tq+j, -row[tp+j])
			}
			A.Set(i, 2*tq+i, 1)
		}
		for _, sign := range []float64{1, -1} {
			c := make([]float64, 2*tq+m)
			for j := range tq {
				c[j], c[tq+j] = sign*l[j], -sign*l[j]
			}
			v, _, err := lp.Simplex(c, A, rhs, 1e-10, nil)
			if errors.Is(err, lp.ErrInfeasible) {
				break // the leads contradict this cone
			}
			if err != nil {
				return 0, 0, fmt.Errorf("%w: identified set: %v", ErrRMLP, err)
			}
			// sign +1: v = min l'δ → θ max = lb − v; sign −1: v = −max l'δ
			if sign > 0 {
				hi = max(hi, lb-v)
			} else {
				lo = min(lo, lb+v)
			}
		}
	}
	if lo > hi {
		return 0, 0, fmt.Errorf("%w: identified set: no cone admits the leads", ErrRMLP)
	}
	return lo, hi, nil
}

// rrCones returns the constraint rows (each ≤ 0, over δ = (pre, post)) of
// the 2·tp cones of Δ^RM(M̄), dropping rows that are identically zero.
func rrCones(tp, tq int, mbar float64) [][][]float64 {
	n := tp + tq
	// diff j: δ_full[j+1] − δ_full[j], δ_full = (pre, 0, post)
	diff := func(j int) []float64 {
		r := make([]float64, n)
		// δ_full index i maps to δ index i for i < tp, none for tp, i−1 after
		at := func(i int) int {
			switch {
			case i < tp:
				return i
			case i == tp:
				return -1
			default:
				return i - 1
			}
		}
		if k := at(j + 1); k >= 0 {
			r[k]++
		}
		if k := at(j); k >= 0 {
			r[k]--
		}
		return r
	}
	var cones [][][]float64
	for s := range tp {
		for _, sg := range []float64{1, -1} {
			ds := diff(s)
			var rows [][]float64
			add := func(d []float64, sign, mult float64) {
				r := make([]float64, n)
				nz := false
				for i := range n {
					r[i] = sign*d[i] - mult*sg*ds[i]
					if math.Abs(r[i]) > 1e-15 {
						nz = true
					}
				}
				if nz {
					rows = append(rows, r)
				}
			}
			for j := range tp {
				d := diff(j)
				add(d, 1, 1)
				add(d, -1, 1)
			}
			for j := tp; j < tp+tq; j++ {
				d := diff(j)
				add(d, 1, mbar)
				add(d, -1, mbar)
			}
			cones = append(cones, rows)
		}
	}
	return cones
}

// rr holds one analysis: the estimates, target and shared normal draws.
type rr struct {
	beta  []float64
	cov   *mat.SymDense
	l     []float64
	tp    int
	tq    int
	opts  RMOptions
	z     *mat.Dense // LFDraws × n standard normals times the covariance's Cholesky factor
	ginv  *mat.Dense // Γ⁻¹
	seTh  float64    // standard error of l'β̂_post
	lfMem map[rrKey]float64
	eager bool // always simulate c_LF (tests compare the shortcut against it)
}

type rrKey struct {
	mbar float64
	cone int
}

func newRR(es EventStudy, l []float64, opts RMOptions) (*rr, error) {
	tp, tq := len(es.Pre), len(es.Post)
	n := tp + tq
	if tp == 0 || tq == 0 || len(l) != tq || es.Cov == nil || es.Cov.SymmetricDim() != n {
		return nil, fmt.Errorf("%w: %d leads, %d lags, target of %d, covariance of %d (want %d)", ErrRMInput, tp, tq, len(l), rrDim(es.Cov), n)
	}
	if !(opts.Alpha > 0 && opts.Alpha < 0.5) || opts.LFDraws < 0 || opts.GridPoints < 3 {
		return nil, fmt.Errorf("%w: alpha %g, LF draws %d, grid %d", ErrRMInput, opts.Alpha, opts.LFDraws, opts.GridPoints)
	}
	r := &rr{beta: append(append([]float64(nil), es.Pre...), es.Post...), cov: es.Cov, l: l, tp: tp, tq: tq, opts: opts, lfMem: map[rrKey]float64{}}
	for _, v := range r.beta {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return nil, fmt.Errorf("%w: non-finite coefficient", ErrRMInput)
		}
	}
	// Γ: first row l', then unit vectors except at l's largest entry
	jmax := 0
	for j := range l {
		if math.Abs(l[j]) > math.Abs(l[jmax]) {
			jmax = j
		}
	}
	if l[jmax] == 0 {
		return nil, fmt.Errorf("%w: target is zero", ErrRMInput)
	}
	gam := mat.NewDense(tq, tq, nil)
	gam.SetRow(0, l)
	row := 1
	for j := range tq {
		if j != jmax {
			gam.Set(row, j, 1)
			row++
		}
	}
	r.ginv = mat.NewDense(tq, tq, nil)
	if err := r.ginv.Inverse(gam); err != nil {
		return nil, fmt.Errorf("%w: target: %v", ErrRMInput, err)
	}
	var ch mat.Cholesky
	if !ch.Factorize(es.Cov) {
		return nil, fmt.Errorf("%w: covariance not positive definite", ErrRMInput)
	}
	v := 0.0
	for i := range tq {
		for j := range tq {
			v += l[i] * es.Cov.At(tp+i, tp+j) * l[j]
		}
	}
	r.seTh = math.Sqrt(v)
	if opts.LFDraws > 0 {
		var u mat.TriDense
		ch.UTo(&u)
		rng := rand.New(rand.NewPCG(opts.Seed, 0x4d62))
		zz := mat.NewDense(opts.LFDraws, n, nil)
		for i := range opts.LFDraws {
			for j := range n {
				zz.Set(i, j, rng.NormFloat64())
			}
		}
		r.z = mat.NewDense(opts.LFDraws, n, nil)
		r.z.Mul(zz, &u) // rows ~ N(0, U'U = Σ)
	}
	return r, nil
}

func rrDim(s *mat.SymDense) int {
	if s == nil {
		return 0
	}
	return s.SymmetricDim()
}

// rrMoments is one cone's moment structure: Y(θ̄) = y0 − y1·θ̄, nuisance X,
// scales σ and covariance Σ_Y.
type rrMoments struct {
	y0, y1 []float64
	x      *mat.Dense // m × (tq−1); nil when tq = 1
	sigma  []float64
	sy     *mat.SymDense
	a      *mat.Dense
}

func (r *rr) moments(cone [][]float64) *rrMoments {
	m, n := len(cone), r.tp+r.tq
	a := mat.NewDense(m, n, nil)
	for i, row := range cone {
		a.SetRow(i, row)
	}
	ap := a.Slice(0, m, r.tp, n)
	var b mat.Dense
	b.Mul(ap, r.ginv)
	mo := &rrMoments{y0: make([]float64, m), y1: make([]float64, m), sigma: make([]float64, m), a: a}
	mat.NewVecDense(m, mo.y0).MulVec(a, mat.NewVecDense(n, r.beta))
	for i := range m {
		mo.y1[i] = b.At(i, 0)
	}
	if r.tq > 1 {
		mo.x = mat.DenseCopyOf(b.Slice(0, m, 1, r.tq))
	}
	var tmp mat.Dense
	tmp.Mul(a, r.cov)
	var sy mat.Dense
	sy.Mul(&tmp, a.T())
	mo.sy = mat.NewSymDense(m, nil)
	for i := range m {
		for j := i; j < m; j++ {
			mo.sy.SetSym(i, j, (sy.At(i, j)+sy.At(j, i))/2)
		}
		mo.sigma[i] = math.Sqrt(mo.sy.At(i, i))
	}
	return mo
}

// at returns the moments Y(θ̄) = y0 − y1·θ̄.
func (mo *rrMoments) at(theta float64) []float64 {
	y := make([]float64, len(mo.y0))
	for i := range y {
		y[i] = mo.y0[i] - mo.y1[i]*theta
	}
	return y
}

// eta solves max γ'y s.t. γ ≥ 0, X'γ = 0, σ'γ = 1 and returns the value
// and γ.
func (mo *rrMoments) eta(y []float64) (float64, []float64, error) {
	m := len(y)
	if mo.x == nil {
		best, j := math.Inf(-1), 0
		for i := range m {
			if v := y[i] / mo.sigma[i]; v > best {
				best, j = v, i
			}
		}
		g := make([]float64, m)
		g[j] = 1 / mo.sigma[j]
		return best, g, nil
	}
	_, k := mo.x.Dims()
	A := mat.NewDense(k+1, m, nil)
	for i := range m {
		for j := range k {
			A.Set(j, i, mo.x.At(i, j))
		}
		A.Set(k, i, mo.sigma[i])
	}
	b := make([]float64, k+1)
	b[k] = 1
	c := make([]float64, m)
	for i := range m {
		c[i] = -y[i]
	}
	v, g, err := lp.Simplex(c, A, b, 1e-10, nil)
	if err != nil {
		return 0, nil, fmt.Errorf("%w: test statistic: %v", ErrRMLP, err)
	}
	return -v, g, nil
}

// lfCritical returns the 1 − κ quantile of η̂ under E[Y] = 0 for cone ci at
// M̄ (memoised; common draws for every cone and M̄).
func (r *rr) lfCritical(mo *rrMoments, key rrKey, kappa float64) (float64, error) {
	if c, ok := r.lfMem[key]; ok {
		return c, nil
	}
	m, n := len(mo.y0), r.tp+r.tq
	etas := make([]float64, r.opts.LFDraws)
	xi := make([]float64, m)
	for d := range r.opts.LFDraws {
		mat.NewVecDense(m, xi).MulVec(mo.a, mat.NewVecDense(n, r.z.RawRowView(d)))
		e, _, err := mo.eta(xi)
		if err != nil {
			return 0, err
		}
		etas[d] = e
	}
	c := rrQuantile(etas, 1-kappa)
	r.lfMem[key] = c
	return c, nil
}

// reject runs the hybrid (or conditional) test of θ̄ on one cone.
//
// The least-favourable critical value costs LFDraws linear programs per
// cone and M̄, so it is simulated only when the decision needs it. The
// conditional p-value P(η ≥ η̂ | V^lo ≤ η ≤ u) grows with the upper cut u,
// and c_LF is at least c_low, the same quantile of γ̂'ξ over the same
// draws (η(ξ) ≥ γ̂'ξ for each draw, γ̂ being dual-feasible). Hence: a
// rejection with u = V^up is a rejection whatever c_LF is, and acceptance
// with η̂ ≤ c_low and u = min(V^up, c_low) is an acceptance whatever c_LF
// is; only the remaining cases simulate c_LF. The decisions are those of
// the test with c_LF always computed (checked in the tests).
func (r *rr) reject(mo *rrMoments, key rrKey, theta float64) (bool, error) {
	m := len(mo.y0)
	y := mo.at(theta)
	eta, g, err := mo.eta(y)
	if err != nil {
		return false, err
	}
	// γ̂'Y without variance (γ̂ on a pair of opposite moments, as M̄ = 0
	// makes the post rows): γ̂'Y = γ̂'E[Y] ≤ 0 under the null, so the exact
	// test rejects when η̂ > 0 (σ'γ̂ = 1 makes γ̂'Σ_Yγ̂ of order 1)
	gv := mat.NewVecDense(m, g)
	if mat.Inner(gv, mo.sy, gv) < 1e-10 {
		return eta > 1e-9, nil
	}
	alpha := r.opts.Alpha
	kappa := alpha / 10
	if c, ok := r.lfMem[key]; ok && r.opts.LFDraws > 0 && eta > c {
		return true, nil // the first stage rejects; c_LF already known
	}
	sgm, vlo, vup, err := mo.truncation(y, eta, g)
	if err != nil {
		return false, err
	}
	if r.opts.LFDraws == 0 {
		return rrTruncP(eta/sgm, vlo/sgm, vup/sgm) <= alpha, nil
	}
	alpha = (alpha - kappa) / (1 - kappa)
	if !r.eager {
		if rrTruncP(eta/sgm, vlo/sgm, vup/sgm) <= alpha {
			return true, nil
		}
		if cLow := r.lfLower(mo, g, kappa); eta <= cLow && rrTruncP(eta/sgm, vlo/sgm, min(vup, cLow)/sgm) > alpha {
			return false, nil
		}
	}
	cLF, err := r.lfCritical(mo, key, kappa)
	if err != nil {
		return false, err
	}
	if eta > cLF {
		return true, nil
	}
	return rrTruncP(eta/sgm, vlo/sgm, min(vup, cLF)/sgm) <= alpha, nil
}

// lfLower returns the 1 − κ quantile (type 7) of γ'ξ over the
// least-favourable draws ξ = A z: a lower bound of the simulated c_LF for
// any dual-feasible γ.
func (r *rr) lfLower(mo *rrMoments, g []float64, kappa float64) float64 {
	m, n := len(mo.y0), r.tp+r.tq
	var ga mat.VecDense // A'γ
	ga.MulVec(mo.a.T(), mat.NewVecDense(m, g))
	vals := make([]float64, r.opts.LFDraws)
	for d := range vals {
		vals[d] = mat.Dot(&ga, mat.NewVecDense(n, r.z.RawRowView(d)))
	}
	return rrQuantile(vals, 1-kappa)
}

// rrQuantile is the type 7 quantile of xs (sorted in place).
func rrQuantile(xs []float64, q float64) float64 {
	sort.Float64s(xs)
	h := float64(len(xs)-1) * q
	i := int(h)
	v := xs[i]
	if i+1 < len(xs) {
		v += (h - float64(i)) * (xs[i+1] - xs[i])
	}
	return v
}

// truncation returns the standard deviation of γ̂'Y and the interval
// [V^lo, V^up] of values t of γ̂'Y over which γ̂ stays optimal given
// S = Y − cγ̂'Y, c = Σ_Yγ̂/γ̂'Σ_Yγ̂ (Andrews, Roth & Pakes 2023, section 3).
// When γ̂ has exactly k+1 positive entries (a non-degenerate vertex, the
// usual case) its basis B is unique and γ̂ is optimal exactly where B's
// reduced costs stay non-positive: Y_j(t) − π(t)'M_j ≤ 0 for every j ∉ B,
// π(t) = M_B^{-T} Y_B(t), M = [X'; σ'], each linear in t. Otherwise the
// interval is the zero set of gap(t) = η(S + ct) − t (convex, ≥ 0), found
// by bisection.
func (mo *rrMoments) truncation(y []float64, eta float64, g []float64) (sgm, vlo, vup float64, err error) {
	sgm, c, s, err := mo.conditioning(y, eta, g)
	if err != nil {
		return 0, 0, 0, err
	}
	if lo, up, ok := mo.truncationBasis(g, c, s); ok {
		return sgm, lo, up, nil
	}
	return mo.truncationBisect(y, eta, g)
}

// conditioning returns σ_γ, c = Σ_Yγ̂/σ_γ² and S = Y − cη̂.
func (mo *rrMoments) conditioning(y []float64, eta float64, g []float64) (float64, []float64, []float64, error) {
	m := len(y)
	gv := mat.NewVecDense(m, g)
	sg2 := mat.Inner(gv, mo.sy, gv)
	if !(sg2 > 0) {
		return 0, nil, nil, fmt.Errorf("%w: degenerate statistic variance", ErrRMLP)
	}
	c := make([]float64, m)
	mat.NewVecDense(m, c).MulVec(mo.sy, gv)
	s := make([]float64, m)
	for i := range c {
		c[i] /= sg2
		s[i] = y[i] - c[i]*eta
	}
	return math.Sqrt(sg2), c, s, nil
}

// truncationBasis is the closed form for a non-degenerate vertex; ok is
// false when γ̂ is degenerate or its basis is ill-conditioned.
func (mo *rrMoments) truncationBasis(g, c, s []float64) (lo, up float64, ok bool) {
	m := len(g)
	k := 0
	if mo.x != nil {
		_, k = mo.x.Dims()
	}
	col := func(j int, dst []float64) {
		for r := range k {
			dst[r] = mo.x.At(j, r)
		}
		dst[k] = mo.sigma[j]
	}
	gmax := 0.0
	for _, v := range g {
		gmax = max(gmax, math.Abs(v))
	}
	var basis []int
	for j, v := range g {
		if v > 1e-9*gmax {
			basis = append(basis, j)
		}
	}
	if len(basis) != k+1 {
		return 0, 0, false
	}
	mb := mat.NewDense(k+1, k+1, nil)
	tmp := make([]float64, k+1)
	for ci, j := range basis {
		col(j, tmp)
		mb.SetCol(ci, tmp)
	}
	var lu mat.LU
	lu.Factorize(mb)
	if lu.Det() == 0 || lu.Cond() > 1e10 {
		return 0, 0, false
	}
	sb, cb := make([]float64, k+1), make([]float64, k+1)
	for ci, j := range basis {
		sb[ci], cb[ci] = s[j], c[j]
	}
	var piS, piC mat.VecDense
	if lu.SolveVecTo(&piS, true, mat.NewVecDense(k+1, sb)) != nil || lu.SolveVecTo(&piC, true, mat.NewVecDense(k+1, cb)) != nil {
		return 0, 0, false
	}
	lo, up = math.Inf(-1), math.Inf(1)
	inBasis := make([]bool, m)
	for _, j := range basis {
		inBasis[j] = true
	}
	for j := range m {
		if inBasis[j] {
			continue
		}
		col(j, tmp)
		mj := mat.NewVecDense(k+1, tmp)
		// a + b t ≤ 0
		a := s[j] - mat.Dot(&piS, mj)
		b := c[j] - mat.Dot(&piC, mj)
		switch {
		case b > 1e-12:
			up = min(up, -a/b)
		case b < -1e-12:
			lo = max(lo, -a/b)
		case a > 1e-9:
			return 0, 0, false // not optimal at all: numerical trouble
		}
	}
	return lo, up, true
}

// truncationBisect finds [V^lo, V^up] as the zero set of gap(t) by
// bisection to 1e-5 standard deviations; ±Inf beyond 10 standard
// deviations past |η̂|.
func (mo *rrMoments) truncationBisect(y []float64, eta float64, g []float64) (sgm, vlo, vup float64, err error) {
	m := len(y)
	gv := mat.NewVecDense(m, g)
	sg2 := mat.Inner(gv, mo.sy, gv)
	if !(sg2 > 0) {
		return 0, 0, 0, fmt.Errorf("%w: degenerate statistic variance", ErrRMLP)
	}
	sgm = math.Sqrt(sg2)
	cvec := make([]float64, m)
	mat.NewVecDense(m, cvec).MulVec(mo.sy, gv)
	for i := range cvec {
		cvec[i] /= sg2
	}
	s := make([]float64, m)
	for i := range s {
		s[i] = y[i] - cvec[i]*eta
	}
	yt := make([]float64, m)
	gap := func(t float64) (float64, error) {
		for i := range yt {
			yt[i] = s[i] + cvec[i]*t
		}
		e, _, err := mo.eta(yt)
		return e - t, err
	}
	tol := 1e-7 * sgm
	bound := func(dir float64) (float64, error) {
		far := eta + dir*(10*sgm+math.Abs(eta))
		gf, err := gap(far)
		if err != nil {
			return 0, err
		}
		if gf <= tol {
			return math.Inf(int(dir)), nil
		}
		in, out := eta, far
		for math.Abs(out-in) > 1e-5*sgm {
			mid := (in + out) / 2
			gm, err := gap(mid)
			if err != nil {
				return 0, err
			}
			if gm <= tol {
				in = mid
			} else {
				out = mid
			}
		}
		return (in + out) / 2, nil
	}
	if vlo, err = bound(-1); err != nil {
		return 0, 0, 0, err
	}
	if vup, err = bound(1); err != nil {
		return 0, 0, 0, err
	}
	return sgm, vlo, vup, nil
}

// rrTruncP is P(Z ≥ x | lo ≤ Z ≤ hi) for a standard normal Z, computed in
// the upper tail when the interval lies above zero.
func rrTruncP(x, lo, hi float64) float64 {
	x = min(max(x, lo), hi)
	n := distuv.UnitNormal
	if lo > 0 {
		num := n.Survival(x) - n.Survival(hi)
		den := n.Survival(lo) - n.Survival(hi)
		if den <= 0 {
			return 0
		}
		return num / den
	}
	num := n.CDF(hi) - n.CDF(x)
	den := n.CDF(hi) - n.CDF(lo)
	if den <= 0 {
		return 0
	}
	return num / den
}

// kept reports whether some cone does not reject θ̄ at M̄.
func (r *rr) kept(ctx context.Context, mbar, theta float64) (bool, error) {
	for ci, cone := range rrCones(r.tp, r.tq, mbar) {
		if err := ctx.Err(); err != nil {
			return false, err
		}
		rej, err := r.reject(r.moments(cone), rrKey{mbar, ci}, theta)
		if err != nil {
			return false, err
		}
		if !rej {
			return true, nil
		}
	}
	return false, nil
}

// interval computes the robust set at M̄.
func (r *rr) interval(ctx context.Context, mbar float64) (RMInterval, error) {
	pre, post := r.beta[:r.tp], r.beta[r.tp:]
	idLo, idHi, err := RMIdentifiedSet(pre, post, r.l, mbar)
	if err != nil {
		return RMInterval{}, err
	}
	iv := RMInterval{MBar: mbar, IDLo: idLo, IDHi: idHi, Lo: math.Inf(1), Hi: math.Inf(-1)}
	for ci, cone := range rrCones(r.tp, r.tq, mbar) {
		if err := ctx.Err(); err != nil {
			return RMInterval{}, err
		}
		mo := r.moments(cone)
		key := rrKey{mbar, ci}
		test := func(th float64) (bool, error) {
			rej, err := r.reject(mo, key, th)
			return !rej, err
		}
		lo, hi, err := rrAccepted(test, idLo-4*r.seTh, idHi+4*r.seTh, r.seTh, r.opts.GridPoints)
		if err != nil {
			return RMInterval{}, err
		}
		iv.Lo, iv.Hi = min(iv.Lo, lo), max(iv.Hi, hi)
	}
	if iv.Lo > iv.Hi {
		iv.Lo, iv.Hi = math.NaN(), math.NaN()
	}
	return iv, nil
}

// rrAccepted returns the smallest and largest accepted θ̄ of test on a grid
// over [a, b] (widened while an end is accepted, up to 2^10 times), refined
// by bisection against the neighbouring rejected grid points to 1e-4·se.
// It returns (+Inf, −Inf) when no grid point is accepted.
func rrAccepted(test func(float64) (bool, error), a, b, se float64, points int) (float64, float64, error) {
	for widen := 0; ; widen++ {
		step := (b - a) / float64(points-1)
		first, last := -1, -1
		for i := range points {
			ok, err := test(a + float64(i)*step)
			if err != nil {
				return 0, 0, err
			}
			if ok {
				if first < 0 {
					first = i
				}
				last = i
			}
		}
		if first < 0 {
			return math.Inf(1), math.Inf(-1), nil
		}
		if (first == 0 || last == points-1) && widen < 10 {
			w := b - a
			if first == 0 {
				a -= w
			}
			if last == points-1 {
				b += w
			}
			continue
		}
		refine := func(in, out float64) (float64, error) {
			for math.Abs(out-in) > 1e-4*se {
				mid := (in + out) / 2
				ok, err := test(mid)
				if err != nil {
					return 0, err
				}
				if ok {
					in = mid
				} else {
					out = mid
				}
			}
			return in, nil
		}
		lo, hi := a+float64(first)*step, a+float64(last)*step
		var err error
		if first > 0 {
			if lo, err = refine(lo, lo-step); err != nil {
				return 0, 0, err
			}
		} else {
			lo = math.Inf(-1)
		}
		if last < points-1 {
			if hi, err = refine(hi, hi+step); err != nil {
				return 0, 0, err
			}
		} else {
			hi = math.Inf(1)
		}
		return lo, hi, nil
	}
}
