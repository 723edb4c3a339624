package robust

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/did/poisson"
)

// FewTreatedClusters is the number of treated clusters below which Critical,
// PTwoSided and AnalyticName use t(G−1) instead of the normal (did's
// FewTreatedClusters, documented there).
const FewTreatedClusters = 30

// webbWeights are Webb's six-point wild bootstrap weights ±√(1/2), ±1, ±√(3/2),
// each with probability 1/6 (Webb 2014, Queen's Economics Dept. WP 1315).
var webbWeights = [6]float64{-math.Sqrt(1.5), -1, -math.Sqrt(0.5), math.Sqrt(0.5), 1, math.Sqrt(1.5)}

// BootWeights fills v with one draw of wild bootstrap weights: Webb's six-point
// when webb is true, Rademacher ±1 otherwise (64 signs per random word).
func BootWeights(rng *rand.Rand, v []float64, webb bool) {
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

// BootDraws holds B draws of G cluster weights, shared by every aggregate of
// one outcome so that their bootstrap distributions are joint.
type BootDraws struct {
	B, G int
	V    []float64 // V[b*G+g]
}

// NewBootDraws draws B sets of G cluster weights from rng, the scheme named
// by BootName(G).
func NewBootDraws(rng *rand.Rand, B, G int) *BootDraws {
	_, webb := BootName(G)
	d := &BootDraws{B: B, G: G, V: make([]float64, B*G)}
	for b := range B {
		BootWeights(rng, d.V[b*G:(b+1)*G], webb)
	}
	return d
}

// BootName names a wild bootstrap weight scheme for the method field.
func BootName(clusters int) (string, bool) {
	if clusters < 12 {
		return "webb", true
	}
	return "rademacher", false
}

// SandwichCR1 returns bread·meat·bread with meat Σ_g s_g s_g' from the
// cluster score sums (scores[g*k+a]) and the CR1 factor
// G/(G-1)·(N-1)/(N-K), where N is the number of observations and K the number
// of parameters (including absorbed fixed effects, as R's glm would count them).
func SandwichCR1(bread *mat.SymDense, scores []float64, used []bool, k, nObs, kParams int) (*mat.SymDense, int) {
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

// WaldChi2 returns the Wald statistic b'V⁻¹b, its degrees of freedom and the
// chi-square p-value. ok is false when V cannot be inverted.
func WaldChi2(b []float64, v *mat.SymDense) (stat float64, df int, p float64, ok bool) {
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
	return stat, k, p, Finite(stat) && Finite(p)
}

// Critical returns the two-sided 95% Critical value: the normal Quantile
// 1.959964 when the treated clusters are many, t(G-1) otherwise
// (Cameron & Miller 2015, section VI.C).
func Critical(treatedClusters, clusters int) float64 {
	if treatedClusters >= FewTreatedClusters || clusters < 3 {
		return distuv.UnitNormal.Quantile(0.975)
	}
	return distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(clusters - 1)}.Quantile(0.975)
}

// PTwoSided returns the two-sided p-value of z against the normal (treated
// clusters many) or t(G-1) distribution, matching Critical.
func PTwoSided(z float64, treatedClusters, clusters int) float64 {
	if treatedClusters >= FewTreatedClusters || clusters < 3 {
		return 2 * distuv.UnitNormal.Survival(math.Abs(z))
	}
	return 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(clusters - 1)}.Survival(math.Abs(z))
}

// Quantile returns the q-Quantile of xs (sorted in place) by the type 7 rule
// (R's default).
func Quantile(xs []float64, q float64) float64 {
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

// Finite reports whether x is neither NaN nor infinite.
func Finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }

// AnalyticName names the analytic method: CR1 with normal or t(G-1) quantiles.
func AnalyticName(treatedClusters, clusters int) string {
	if treatedClusters >= FewTreatedClusters || clusters < 3 {
		return "analytic-cr1"
	}
	return "analytic-cr1-t(G-1)"
}

// AddOuter adds w·x x' to the symmetric m.
func AddOuter(m *mat.SymDense, x []float64, w float64) {
	for a := range x {
		for b := a; b < len(x); b++ {
			m.SetSym(a, b, m.At(a, b)+w*x[a]*x[b])
		}
	}
}

// Logit fits a weighted logistic regression of d on x by Newton-Raphson and
// returns fitted probabilities and (Σ w p(1−p) x x')⁻¹. Perfect separation
// (fitted probabilities within 1e-8 of 0 or 1 for the treated) is an error.
func Logit(x [][]float64, d, w []float64) ([]float64, *mat.SymDense, error) {
	k := len(x[0])
	beta := make([]float64, k)
	p := make([]float64, len(x))
	hinv := mat.NewSymDense(k, nil)
	// start from the weighted share
	sd, sw := 0.0, 0.0
	for i := range d {
		sd += w[i] * d[i]
		sw += w[i]
	}
	beta[0] = math.Log(sd / (sw - sd))
	for iter := 0; ; iter++ {
		h := mat.NewSymDense(k, nil)
		grad := make([]float64, k)
		for i, xi := range x {
			eta := 0.0
			for a := range k {
				eta += xi[a] * beta[a]
			}
			p[i] = 1 / (1 + math.Exp(-eta))
			AddOuter(h, xi, w[i]*p[i]*(1-p[i]))
			for a := range k {
				grad[a] += w[i] * (d[i] - p[i]) * xi[a]
			}
		}
		if err := poisson.InvSym(hinv, h); err != nil {
			return nil, nil, fmt.Errorf("logistic regression: %w", err)
		}
		step := make([]float64, k)
		mat.NewVecDense(k, step).MulVec(hinv, mat.NewVecDense(k, grad))
		maxStep := 0.0
		for a := range k {
			beta[a] += step[a]
			maxStep = max(maxStep, math.Abs(step[a]))
		}
		if maxStep < 1e-10 {
			break
		}
		if iter > 100 || !Finite(maxStep) {
			return nil, nil, errors.New("logistic regression did not converge (separation?)")
		}
	}
	for i := range p {
		if d[i] == 0 && p[i] > 1-1e-8 {
			return nil, nil, errors.New("propensity score near 1 for a control: treated and controls separate on the covariates")
		}
	}
	return p, hinv, nil
}

// ClusterSums returns Σ φ by cluster.
func ClusterSums(phi []float64, cl []int, G int) []float64 {
	s := make([]float64, G)
	for u, v := range phi {
		s[cl[u]] += v
	}
	return s
}

// InferSums turns an estimate and its cluster influence sums into a standard
// error, 95% interval and p-value: analytic with t(H−1) quantiles (H the
// smaller of the treated and untreated cluster counts), or, when bd is given,
// by the multiplier bootstrap, whose interval est ± the 95% Quantile of
// |Σ v_g s_g| and p-value P(|Σ v_g s_g| ≥ |est|) come from the same draws.
func InferSums(est float64, s []float64, bd *BootDraws, H int) (se, lo, hi, p float64) {
	ss := 0.0
	for _, v := range s {
		ss += v * v
	}
	se = math.Sqrt(ss)
	if bd == nil {
		t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(max(H-1, 1))}
		c := t.Quantile(0.975)
		return se, est - c*se, est + c*se, 2 * t.Survival(math.Abs(est/se))
	}
	abs := make([]float64, bd.B)
	hits := 0
	for i := range abs {
		v := bd.V[i*bd.G : (i+1)*bd.G]
		x := 0.0
		for g, sg := range s {
			x += v[g] * sg
		}
		abs[i] = math.Abs(x)
		if abs[i] >= math.Abs(est) {
			hits++
		}
	}
	q := Quantile(abs, 0.95)
	return se, est - q, est + q, float64(hits+1) / float64(bd.B+1)
}

// DemeanGroups removes weighted group means from v in place.
func DemeanGroups(v, w []float64, grp []int, ng int) {
	s := make([]float64, ng)
	sw := make([]float64, ng)
	for i, x := range v {
		s[grp[i]] += w[i] * x
		sw[grp[i]] += w[i]
	}
	for i := range v {
		if sw[grp[i]] > 0 {
			v[i] -= s[grp[i]] / sw[grp[i]]
		}
	}
}

// MaxLeadBins is how many groups of consecutive leads the pre-trend test
// compares at most.
const MaxLeadBins = 4

// LeadTest is the joint test that the pre-period (lead) estimates b, with
// cluster-robust covariance v from G clusters, are all zero.
//
// A Wald test of many leads with a cluster-robust covariance over-rejects
// badly when clusters are few: the k×k covariance is estimated from G cluster
// sums and is nearly singular when k approaches G (Cameron & Miller 2015,
// "A Practitioner's Guide to Cluster-Robust Inference", J. Human Resources,
// section VII.B; Hansen 2007). So the leads are first averaged into at most
// MaxLeadBins groups of consecutive event times (b̄ = A b, V̄ = A V A'), and
// the statistic W = b̄'V̄⁻¹b̄ is referred to the F distribution with the
// Hotelling T² correction F = W·(G − q)/(q·(G − 1)) on (q, G − q) degrees of
// freedom, q the number of groups. With G ≤ q no test is possible (ok false).
func LeadTest(b []float64, v *mat.SymDense, G int) (p float64, ok bool) {
	k := len(b)
	if k == 0 {
		return 0, false
	}
	q := min(k, MaxLeadBins)
	if G <= q {
		q = G - 1
	}
	if q < 1 {
		return 0, false
	}
	// A averages consecutive leads: group j holds leads [j*k/q, (j+1)*k/q).
	a := mat.NewDense(q, k, nil)
	for j := 0; j < q; j++ {
		lo, hi := j*k/q, (j+1)*k/q
		for i := lo; i < hi; i++ {
			a.Set(j, i, 1/float64(hi-lo))
		}
	}
	var bb mat.VecDense
	bb.MulVec(a, mat.NewVecDense(k, b))
	var av mat.Dense
	av.Mul(a, v)
	var vv mat.Dense
	vv.Mul(&av, a.T())
	vs := mat.NewSymDense(q, nil)
	for i := 0; i < q; i++ {
		for j := i; j < q; j++ {
			vs.SetSym(i, j, (vv.At(i, j)+vv.At(j, i))/2)
		}
	}
	w, _, _, ok := WaldChi2(bb.RawVector().Data, vs)
	if !ok {
		return 0, false
	}
	f := w * float64(G-q) / (float64(q) * float64(G-1))
	p = distuv.F{D1: float64(q), D2: float64(G - q)}.Survival(f)
	return p, Finite(p)
}

// OneReg is a weighted regression on one regressor after other effects
// (intercepts, fixed effects) were absorbed by the weighted projection Absorb
// (Frisch-Waugh-Lovell). KParams counts every parameter for the CR1 factor.
type OneReg struct {
	X, Y, W []float64
	Cl      []int
	G       int
	KParams int
	Absorb  func(v []float64)
}

// OneRes is OneReg's fit.
type OneRes struct {
	B, SE float64
	Sxx   float64
	U     []float64 // residuals
	G     int       // clusters used
	Xt    []float64 // absorbed regressor
}

// Fit fits the slope and its CR1 standard error; a regressor with no
// variation left or no usable standard error is poisson.ErrSingular.
func (r *OneReg) Fit() (*OneRes, error) {
	xt := append([]float64(nil), r.X...)
	yt := append([]float64(nil), r.Y...)
	r.Absorb(xt)
	r.Absorb(yt)
	sxx, sxy := 0.0, 0.0
	for i := range xt {
		sxx += r.W[i] * xt[i] * xt[i]
		sxy += r.W[i] * xt[i] * yt[i]
	}
	if !(sxx > 1e-12) {
		return nil, poisson.ErrSingular
	}
	b := sxy / sxx
	u := yt
	for i := range u {
		u[i] -= b * xt[i]
	}
	res := &OneRes{B: b, Sxx: sxx, U: u, Xt: xt}
	var g int
	res.SE, g = r.cr1(xt, u)
	res.G = g
	if !(res.SE > 0) {
		return nil, poisson.ErrSingular
	}
	return res, nil
}

// cr1 returns the CR1 standard error of the slope given residuals u.
func (r *OneReg) cr1(xt, u []float64) (float64, int) {
	sc := make([]float64, r.G)
	used := make([]bool, r.G)
	n := 0
	sxx := 0.0
	for i := range u {
		if r.W[i] == 0 {
			continue
		}
		n++
		sc[r.Cl[i]] += r.W[i] * xt[i] * u[i]
		used[r.Cl[i]] = true
		sxx += r.W[i] * xt[i] * xt[i]
	}
	meat, G := 0.0, 0
	for g, ok := range used {
		if ok {
			G++
			meat += sc[g] * sc[g]
		}
	}
	if G < 2 || n <= r.KParams {
		return 0, G
	}
	adj := float64(G) / float64(G-1) * float64(n-1) / float64(n-r.KParams)
	return math.Sqrt(adj*meat) / sxx, G
}
