package survival

import (
	"context"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// Ties says how the Cox partial likelihood treats events at the same time.
type Ties uint8

// The two approximations. Efron is the default (as in R's coxph): it is
// closer to the exact partial likelihood when ties are many.
const (
	Efron Ties = iota
	Breslow
)

// String names the approximation.
func (t Ties) String() string {
	if t == Breslow {
		return "breslow"
	}
	return "efron"
}

// CoxData is the input of Cox: one row per subject.
type CoxData struct {
	Time  []float64
	Event []bool
	X     *mat.Dense // n × p covariates
	// Strata give each stratum its own baseline hazard; nil is one stratum.
	Strata []int
	// Cluster groups subjects for the robust variance (sums of score
	// residuals within a cluster); nil makes each subject its own cluster.
	Cluster []int
}

// CoxOptions tunes Cox; the zero value is Efron's ties, 50 iterations.
type CoxOptions struct {
	Ties    Ties
	MaxIter int
}

// CoxFit is a fitted proportional-hazards model.
type CoxFit struct {
	Coef     []float64 // log hazard ratios
	SE       []float64 // cluster-robust standard errors (sandwich I⁻¹ B I⁻¹, B summed over clusters)
	NaiveSE  []float64 // model-based standard errors, sqrt(diag I⁻¹)
	Robust   *mat.SymDense
	LogLik   float64 // partial log-likelihood at Coef
	LogLik0  float64 // at zero
	Iter     int
	Ties     Ties
	Clusters int
	N        int
	Events   int
}

// Z returns the Wald statistic of coefficient j with the robust SE.
func (f *CoxFit) Z(j int) float64 { return f.Coef[j] / f.SE[j] }

// P returns the two-sided Wald p-value of coefficient j with the robust SE.
func (f *CoxFit) P(j int) float64 { return 2 * distuv.UnitNormal.Survival(math.Abs(f.Z(j))) }

// HazardRatio returns exp(coef j) and its 95% interval from the robust SE.
func (f *CoxFit) HazardRatio(j int) (hr, lo, hi float64) {
	z := distuv.UnitNormal.Quantile(0.975)
	return math.Exp(f.Coef[j]), math.Exp(f.Coef[j] - z*f.SE[j]), math.Exp(f.Coef[j] + z*f.SE[j])
}

// coxState holds the data sorted within strata, covariates centred.
type coxState struct {
	n, p   int
	x      [][]float64 // centred
	time   []float64
	event  []bool
	strata [][]int // subject indices per stratum, time descending
	ties   Ties
}

// Cox fits the proportional-hazards model by Newton–Raphson with step
// halving, stratified baselines and the chosen ties, and returns model-based
// and cluster-robust standard errors (Lin & Wei 1989; what R's coxph reports
// as "robust se" with cluster()).
func Cox(ctx context.Context, d CoxData, opts CoxOptions) (*CoxFit, error) {
	st, err := newCoxState(d, opts.Ties)
	if err != nil {
		return nil, err
	}
	maxIter := opts.MaxIter
	if maxIter <= 0 {
		maxIter = 50
	}
	p := st.p
	beta := make([]float64, p)
	ll, u, info := st.derivs(beta)
	fit := &CoxFit{LogLik0: ll, Ties: opts.Ties, N: st.n}
	for _, e := range d.Event {
		if e {
			fit.Events++
		}
	}
	if fit.Events == 0 {
		return nil, fmt.Errorf("%w: no events", ErrInput)
	}
	for it := 1; it <= maxIter; it++ {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		var chol mat.Cholesky
		if !chol.Factorize(info) {
			return nil, fmt.Errorf("%w: the information matrix is singular (a covariate without variation, or separation)", ErrInput)
		}
		var step mat.VecDense
		if err := chol.SolveVecTo(&step, mat.NewVecDense(p, u)); err != nil {
			return nil, fmt.Errorf("%w: %v", ErrInput, err)
		}
		next := make([]float64, p)
		var nll float64
		var nu []float64
		var ninfo *mat.SymDense
		scale := 1.0
		for h := 0; h < 30; h++ {
			for j := range next {
				next[j] = beta[j] + scale*step.AtVec(j)
			}
			nll, nu, ninfo = st.derivs(next)
			if !math.IsNaN(nll) && nll >= ll-1e-12*math.Abs(ll) {
				break
			}
			scale /= 2
		}
		change := math.Abs(nll - ll)
		maxStep := 0.0
		for j := range next {
			maxStep = math.Max(maxStep, math.Abs(next[j]-beta[j]))
		}
		beta, ll, u, info = next, nll, nu, ninfo
		fit.Iter = it
		if change <= 1e-13*math.Max(1, math.Abs(ll)) && maxStep < 1e-9 {
			break
		}
		if it == maxIter {
			return nil, fmt.Errorf("%w: no convergence in %d iterations", ErrInput, maxIter)
		}
	}
	for _, b := range beta {
		if math.IsNaN(b) || math.IsInf(b, 0) || math.Abs(b) > 50 {
			return nil, fmt.Errorf("%w: a coefficient diverges (monotone likelihood: a group with no events or only events)", ErrInput)
		}
	}
	var chol mat.Cholesky
	if !chol.Factorize(info) {
		return nil, fmt.Errorf("%w: the information matrix is singular at the estimate", ErrInput)
	}
	var inv mat.SymDense
	if err := chol.InverseTo(&inv); err != nil {
		return nil, fmt.Errorf("%w: %v", ErrInput, err)
	}
	res := st.scoreResiduals(beta)
	// Sum the score residuals within clusters.
	cl := d.Cluster
	sums := map[int][]float64{}
	var keys []int
	for i := 0; i < st.n; i++ {
		k := i
		if cl != nil {
			k = cl[i]
		}
		s, ok := sums[k]
		if !ok {
			s = make([]float64, p)
			sums[k] = s
			keys = append(keys, k)
		}
		for j := range s {
			s[j] += res[i][j]
		}
	}
	b := mat.NewSymDense(p, nil)
	for _, k := range keys {
		s := sums[k]
		for a := 0; a < p; a++ {
			for c := a; c < p; c++ {
				b.SetSym(a, c, b.At(a, c)+s[a]*s[c])
			}
		}
	}
	var tmp mat.Dense
	tmp.Mul(&inv, b)
	var rob mat.Dense
	rob.Mul(&tmp, &inv)
	fit.Robust = mat.NewSymDense(p, nil)
	for a := 0; a < p; a++ {
		for c := a; c < p; c++ {
			fit.Robust.SetSym(a, c, (rob.At(a, c)+rob.At(c, a))/2)
		}
	}
	fit.Coef, fit.LogLik, fit.Clusters = beta, ll, len(keys)
	for j := 0; j < p; j++ {
		fit.NaiveSE = append(fit.NaiveSE, math.Sqrt(inv.At(j, j)))
		fit.SE = append(fit.SE, math.Sqrt(fit.Robust.At(j, j)))
	}
	return fit, nil
}

func newCoxState(d CoxData, ties Ties) (*coxState, error) {
	n := len(d.Time)
	if len(d.Event) != n || (d.Strata != nil && len(d.Strata) != n) || (d.Cluster != nil && len(d.Cluster) != n) {
		return nil, fmt.Errorf("%w: columns of different lengths", ErrInput)
	}
	if d.X == nil {
		return nil, fmt.Errorf("%w: no covariates", ErrInput)
	}
	if r, _ := d.X.Dims(); r != n {
		return nil, fmt.Errorf("%w: %d covariate rows for %d subjects", ErrInput, r, n)
	}
	if err := checkTimes(d.Time); err != nil {
		return nil, err
	}
	_, p := d.X.Dims()
	st := &coxState{n: n, p: p, time: d.Time, event: d.Event, ties: ties, x: make([][]float64, n)}
	mean := make([]float64, p)
	for i := 0; i < n; i++ {
		for j := 0; j < p; j++ {
			v := d.X.At(i, j)
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("%w: subject %d covariate %d is %v", ErrInput, i, j, v)
			}
			mean[j] += v / float64(n)
		}
	}
	for i := 0; i < n; i++ {
		st.x[i] = make([]float64, p)
		for j := 0; j < p; j++ {
			st.x[i][j] = d.X.At(i, j) - mean[j]
		}
	}
	for _, idx := range byStratum(d.Strata, n) {
		idx = sortedBy(d.Time, idx)
		for a, b := 0, len(idx)-1; a < b; a, b = a+1, b-1 {
			idx[a], idx[b] = idx[b], idx[a]
		}
		st.strata = append(st.strata, idx)
	}
	return st, nil
}

// tieGroup is one distinct event time of a stratum, as visited from the
// latest time: its subjects and the running risk-set sums after adding them.
type tieGroup struct {
	members []int // subjects with this time
	deaths  []int
}

// groups walks a stratum's subjects (time descending) by distinct time.
func (st *coxState) groups(idx []int, fn func(g tieGroup)) {
	for i := 0; i < len(idx); {
		t := st.time[idx[i]]
		k := i
		var g tieGroup
		for ; k < len(idx) && st.time[idx[k]] == t; k++ {
			g.members = append(g.members, idx[k])
			if st.event[idx[k]] {
				g.deaths = append(g.deaths, idx[k])
			}
		}
		fn(g)
		i = k
	}
}

func (st *coxState) eta(beta []float64, i int) float64 {
	s := 0.0
	for j, b := range beta {
		s += b * st.x[i][j]
	}
	return s
}

// frac is the share of the tied deaths' weight removed in term k of d.
func (st *coxState) frac(k, d int) float64 {
	if st.ties == Breslow {
		return 0
	}
	return float64(k) / float64(d)
}

// derivs returns the partial log-likelihood, score and information at beta.
func (st *coxState) derivs(beta []float64) (float64, []float64, *mat.SymDense) {
	p := st.p
	ll := 0.0
	u := make([]float64, p)
	info := make([]float64, p*p)
	s1, s1d := make([]float64, p), make([]float64, p)
	s2, s2d := make([]float64, p*p), make([]float64, p*p)
	a := make([]float64, p)
	for _, idx := range st.strata {
		s0 := 0.0
		clear(s1)
		clear(s2)
		st.groups(idx, func(g tieGroup) {
			for _, i := range g.members {
				w := math.Exp(st.eta(beta, i))
				s0 += w
				for j := 0; j < p; j++ {
					s1[j] += w * st.x[i][j]
					for k := 0; k < p; k++ {
						s2[j*p+k] += w * st.x[i][j] * st.x[i][k]
					}
				}
			}
			d := len(g.deaths)
			if d == 0 {
				return
			}
			s0d := 0.0
			clear(s1d)
			clear(s2d)
			for _, i := range g.deaths {
				eta := st.eta(beta, i)
				w := math.Exp(eta)
				ll += eta
				s0d += w
				for j := 0; j < p; j++ {
					u[j] += st.x[i][j]
					s1d[j] += w * st.x[i][j]
					for k := 0; k < p; k++ {
						s2d[j*p+k] += w * st.x[i][j] * st.x[i][k]
					}
				}
			}
			for k := 0; k < d; k++ {
				f := st.frac(k, d)
				den := s0 - f*s0d
				ll -= math.Log(den)
				for j := 0; j < p; j++ {
					a[j] = (s1[j] - f*s1d[j]) / den
					u[j] -= a[j]
				}
				for j := 0; j < p; j++ {
					for l := 0; l < p; l++ {
						info[j*p+l] += (s2[j*p+l]-f*s2d[j*p+l])/den - a[j]*a[l]
					}
				}
			}
		})
	}
	sym := mat.NewSymDense(p, nil)
	for j := 0; j < p; j++ {
		for l := j; l < p; l++ {
			sym.SetSym(j, l, (info[j*p+l]+info[l*p+j])/2)
		}
	}
	return ll, u, sym
}

// scoreResiduals returns each subject's score residual at beta: its share of
// the score, (x_i − x̄(t)) dM_i(t) summed over event times, with tied deaths
// weighted as the ties approximation weighs them. They sum to the score.
func (st *coxState) scoreResiduals(beta []float64) [][]float64 {
	p := st.p
	res := make([][]float64, st.n)
	for i := range res {
		res[i] = make([]float64, p)
	}
	type incr struct {
		h, hc float64   // Σ_k 1/den_k and Σ_k f_k/den_k
		g, gc []float64 // Σ_k a_k/den_k and Σ_k f_k a_k/den_k
		abar  []float64 // mean over k of a_k
	}
	w := make([]float64, st.n)
	for i := range w {
		w[i] = math.Exp(st.eta(beta, i))
	}
	for _, idx := range st.strata {
		// Descending pass: each distinct time's increments.
		var incs []incr
		var owner [][]int // members of each distinct time
		s0 := 0.0
		s1, s1d := make([]float64, p), make([]float64, p)
		st.groups(idx, func(g tieGroup) {
			for _, i := range g.members {
				s0 += w[i]
				for j := 0; j < p; j++ {
					s1[j] += w[i] * st.x[i][j]
				}
			}
			in := incr{g: make([]float64, p), gc: make([]float64, p), abar: make([]float64, p)}
			if d := len(g.deaths); d > 0 {
				s0d := 0.0
				clear(s1d)
				for _, i := range g.deaths {
					s0d += w[i]
					for j := 0; j < p; j++ {
						s1d[j] += w[i] * st.x[i][j]
					}
				}
				for k := 0; k < d; k++ {
					f := st.frac(k, d)
					den := s0 - f*s0d
					in.h += 1 / den
					in.hc += f / den
					for j := 0; j < p; j++ {
						a := (s1[j] - f*s1d[j]) / den
						in.g[j] += a / den
						in.gc[j] += f * a / den
						in.abar[j] += a / float64(d)
					}
				}
			}
			incs = append(incs, in)
			owner = append(owner, g.members)
		})
		// Ascending pass: cumulative sums over times <= each subject's time.
		cumH := 0.0
		cumG := make([]float64, p)
		for e := len(incs) - 1; e >= 0; e-- {
			in := incs[e]
			cumH += in.h
			for j := 0; j < p; j++ {
				cumG[j] += in.g[j]
			}
			for _, i := range owner[e] {
				for j := 0; j < p; j++ {
					res[i][j] = -w[i] * (st.x[i][j]*cumH - cumG[j])
				}
				if st.event[i] {
					for j := 0; j < p; j++ {
						res[i][j] += w[i]*(st.x[i][j]*in.hc-in.gc[j]) + st.x[i][j] - in.abar[j]
					}
				}
			}
		}
	}
	return res
}
