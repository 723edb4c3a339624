package infer

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"
)

// ErrDesign is returned (wrapped, with the row or column at fault) for a
// linear model the functions of this package cannot use: mismatched lengths,
// values that are not finite, negative weights, fewer than two clusters, too
// few observations, fixed-effect groups that span clusters, or a singular
// cross-product matrix.
var ErrDesign = errors.New("infer: bad linear design")

// Design is a linear model y = Xβ + u estimated by weighted least squares,
// whose errors may be heteroskedastic and correlated within clusters. The
// slices are read, never kept or modified.
type Design struct {
	// X holds the n×k regressors, the intercept column included when wanted.
	X mat.Matrix
	// Y holds the n outcomes.
	Y []float64
	// Weights holds n non-negative observation weights (WLS); nil means 1.
	// Rows of weight 0 are left out of every computation and count.
	Weights []float64
	// Cluster holds the n cluster ids (any integers; order does not matter).
	Cluster []int
	// Absorb optionally holds the n group ids of a one-way fixed effect
	// (unit effects, say) that is partialled out of X and Y before the fit
	// (Frisch–Waugh–Lovell). Each group must lie inside one cluster: then the
	// wild bootstrap of the partialled model equals that of the model with the
	// dummies (the bootstrap weights are constant within a group). Its levels
	// count as parameters in the CR1 factor. Fixed effects not nested in the
	// clusters (period effects) belong in X as dummy columns.
	Absorb []int
}

// OLS is a weighted least-squares fit with its CR1 cluster-robust covariance
// and the per-cluster pieces the restricted wild bootstrap reuses. It is
// immutable after FitOLS and safe for concurrent use.
type OLS struct {
	// Beta holds the k coefficients.
	Beta []float64
	// Cov is the CR1 covariance of Beta: G/(G−1)·(N−1)/(N−K)·A(Σ_g s_g s_g')A
	// with A = (X'WX)⁻¹ and s_g = X_g'W_g û_g, the variance R's
	// sandwich::vcovCL(type = "HC1") and Stata's vce(cluster) report.
	Cov *mat.SymDense
	// N is the number of observations of positive weight, K the number of
	// parameters (columns of X plus absorbed levels), G the number of clusters.
	N, K, G int

	k      int
	a      *mat.SymDense // (X'WX)⁻¹, k×k
	scores *mat.Dense    // G×k, s_g = X_g'W_g û_g
	hess   []*mat.SymDense
	factor float64 // CR1 small-sample factor
	ids    []int   // cluster id of each cluster index
}

// Clusters returns the cluster ids in the order of the cluster index the
// bootstrap uses (ascending). The caller may keep the slice.
func (f *OLS) Clusters() []int { return append([]int(nil), f.ids...) }

// SE returns the CR1 standard error of a'β̂.
func (f *OLS) SE(a []float64) float64 {
	av := mat.NewVecDense(len(a), a)
	return math.Sqrt(mat.Inner(av, f.Cov, av))
}

// TStat returns the CR1 t statistic (a'β̂ − r)/SE(a'β̂) of the restriction
// a'β = r.
func (f *OLS) TStat(a []float64, r float64) float64 {
	return (wcrDot(a, f.Beta) - r) / f.SE(a)
}

// FitOLS fits the design by weighted least squares and computes its CR1
// covariance. Errors wrap ErrDesign.
func FitOLS(d Design) (*OLS, error) {
	if d.X == nil {
		return nil, fmt.Errorf("%w: no regressors", ErrDesign)
	}
	n, k := d.X.Dims()
	switch {
	case len(d.Y) != n:
		return nil, fmt.Errorf("%w: %d outcomes for %d rows of X", ErrDesign, len(d.Y), n)
	case len(d.Cluster) != n:
		return nil, fmt.Errorf("%w: %d cluster ids for %d rows of X", ErrDesign, len(d.Cluster), n)
	case d.Weights != nil && len(d.Weights) != n:
		return nil, fmt.Errorf("%w: %d weights for %d rows of X", ErrDesign, len(d.Weights), n)
	case d.Absorb != nil && len(d.Absorb) != n:
		return nil, fmt.Errorf("%w: %d fixed-effect ids for %d rows of X", ErrDesign, len(d.Absorb), n)
	case k == 0:
		return nil, fmt.Errorf("%w: X has no columns", ErrDesign)
	}
	// Keep rows of positive weight, ordered by cluster so that each cluster is
	// a block of rows.
	rows := make([]int, 0, n)
	for i := range n {
		w := 1.0
		if d.Weights != nil {
			w = d.Weights[i]
		}
		if !(w >= 0) || math.IsInf(w, 0) {
			return nil, fmt.Errorf("%w: weight %v at row %d", ErrDesign, w, i)
		}
		if w == 0 {
			continue
		}
		if !wcrFinite(d.Y[i]) {
			return nil, fmt.Errorf("%w: outcome %v at row %d", ErrDesign, d.Y[i], i)
		}
		rows = append(rows, i)
	}
	sort.SliceStable(rows, func(a, b int) bool { return d.Cluster[rows[a]] < d.Cluster[rows[b]] })
	N := len(rows)
	x := mat.NewDense(max(N, 1), k, nil)
	y := make([]float64, N)
	w := make([]float64, N)
	cl := make([]int, N)
	var ids []int
	raw, isDense := d.X.(*mat.Dense)
	for r, i := range rows {
		dst := x.RawRowView(r)
		if isDense {
			copy(dst, raw.RawRowView(i))
		} else {
			for j := range k {
				dst[j] = d.X.At(i, j)
			}
		}
		for j, v := range dst {
			if !wcrFinite(v) {
				return nil, fmt.Errorf("%w: X[%d, %d] = %v", ErrDesign, i, j, v)
			}
		}
		y[r] = d.Y[i]
		w[r] = 1
		if d.Weights != nil {
			w[r] = d.Weights[i]
		}
		if r == 0 || d.Cluster[i] != ids[len(ids)-1] {
			ids = append(ids, d.Cluster[i])
		}
		cl[r] = len(ids) - 1
	}
	G := len(ids)
	K := k
	if d.Absorb != nil {
		levels, err := wcrAbsorb(x, y, w, cl, rows, d.Absorb)
		if err != nil {
			return nil, err
		}
		K += levels
	}
	if G < 2 {
		return nil, fmt.Errorf("%w: %d cluster(s) with positive weight; need at least 2", ErrDesign, G)
	}
	if N <= K {
		return nil, fmt.Errorf("%w: %d observations for %d parameters", ErrDesign, N, K)
	}
	// xs = √W·X, the weighted rows.
	xs := mat.NewDense(N, k, nil)
	for r := range N {
		sw := math.Sqrt(w[r])
		dst, src := xs.RawRowView(r), x.RawRowView(r)
		for j := range k {
			dst[j] = sw * src[j]
		}
	}
	xtx := mat.NewSymDense(k, nil)
	xtx.SymOuterK(1, xs.T())
	var ch mat.Cholesky
	if !ch.Factorize(xtx) {
		return nil, fmt.Errorf("%w: X'WX is singular (collinear columns?)", ErrDesign)
	}
	if c := ch.Cond(); !(c < 1e13) {
		return nil, fmt.Errorf("%w: X'WX is singular (condition number %.3g)", ErrDesign, c)
	}
	a := mat.NewSymDense(k, nil)
	if err := ch.InverseTo(a); err != nil {
		return nil, fmt.Errorf("%w: inverting X'WX: %v", ErrDesign, err)
	}
	xty := make([]float64, k)
	for r := range N {
		wy := w[r] * y[r]
		for j, v := range x.RawRowView(r) {
			xty[j] += wy * v
		}
	}
	beta := make([]float64, k)
	mat.NewVecDense(k, beta).MulVec(a, mat.NewVecDense(k, xty))
	f := &OLS{Beta: beta, N: N, K: K, G: G, k: k, a: a, ids: ids,
		scores: mat.NewDense(G, k, nil), hess: make([]*mat.SymDense, G)}
	f.factor = float64(G) / float64(G-1) * float64(N-1) / float64(N-K)
	start := 0
	for g := range G {
		end := start
		for end < N && cl[end] == g {
			end++
		}
		s := f.scores.RawRowView(g)
		for r := start; r < end; r++ {
			row := x.RawRowView(r)
			u := y[r] - wcrDot(row, beta)
			for j := range k {
				s[j] += w[r] * row[j] * u
			}
		}
		h := mat.NewSymDense(k, nil)
		h.SymOuterK(1, xs.Slice(start, end, 0, k).T())
		f.hess[g] = h
		start = end
	}
	f.Cov = f.sandwich(f.scores)
	return f, nil
}

// sandwich returns factor·A(S'S)A for cluster scores S (G×k).
func (f *OLS) sandwich(s *mat.Dense) *mat.SymDense {
	meat := mat.NewSymDense(f.k, nil)
	meat.SymOuterK(1, s.T())
	var am, v mat.Dense
	am.Mul(f.a, meat)
	v.Mul(&am, f.a)
	out := mat.NewSymDense(f.k, nil)
	for i := range f.k {
		for j := i; j < f.k; j++ {
			out.SetSym(i, j, f.factor*(v.At(i, j)+v.At(j, i))/2)
		}
	}
	return out
}

// wcrAbsorb removes weighted group means of the fixed effect from every
// column of x and from y in place and returns the number of groups. rows maps
// each kept row to its index in the caller's slices.
func wcrAbsorb(x *mat.Dense, y, w []float64, cl, rows, grp []int) (int, error) {
	idx := map[int]int{}
	home := []int{}
	g := make([]int, len(rows))
	for r, i := range rows {
		j, ok := idx[grp[i]]
		if !ok {
			j = len(home)
			idx[grp[i]] = j
			home = append(home, cl[r])
		} else if home[j] != cl[r] {
			return 0, fmt.Errorf("%w: fixed-effect group %d at row %d spans two clusters; put it in X instead", ErrDesign, grp[i], i)
		}
		g[r] = j
	}
	ng := len(home)
	_, k := x.Dims()
	sw := make([]float64, ng)
	sum := make([]float64, ng*(k+1))
	for r := range rows {
		sw[g[r]] += w[r]
		o := g[r] * (k + 1)
		for j, v := range x.RawRowView(r) {
			sum[o+j] += w[r] * v
		}
		sum[o+k] += w[r] * y[r]
	}
	for r := range rows {
		o := g[r] * (k + 1)
		row := x.RawRowView(r)
		for j := range row {
			row[j] -= sum[o+j] / sw[g[r]]
		}
		y[r] -= sum[o+k] / sw[g[r]]
	}
	return ng, nil
}

func wcrDot(a, b []float64) float64 {
	s := 0.0
	for i := range a {
		s += a[i] * b[i]
	}
	return s
}

func wcrFinite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
