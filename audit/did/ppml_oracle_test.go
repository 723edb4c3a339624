package did

// The dense Poisson fixed-effects fit below is the test oracle for the fast
// stacked fit of audit/did/poisson: it builds the fixed effects by alternating
// projections on the full design and is itself checked against R (TestPoissonFEAgainstR).

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/did/poisson"
)

// fitPoissonFE fits y on the columns x[j] (each length n) with fixed effects
// fe1 (values in [0,n1)) and fe2 (in [0,n2)), prior weights w (nil: 1) and
// clusters cl (in [0,G)).
func fitPoissonFE(y []float64, x [][]float64, fe1 []int, n1 int, fe2 []int, n2 int, w []float64, cl []int, G int) (*poisson.Fit, error) {
	n, k := len(y), len(x)
	if w == nil {
		w = make([]float64, n)
		for i := range w {
			w[i] = 1
		}
	}
	keep := make([]bool, n)
	for i := range keep {
		keep[i] = w[i] > 0
	}
	fit := &poisson.Fit{Keep: keep}
	// drop all-zero groups until stable
	had1, had2 := make([]bool, n1), make([]bool, n2)
	for i := range y {
		if keep[i] {
			had1[fe1[i]], had2[fe2[i]] = true, true
		}
	}
	for {
		s1, s2 := make([]float64, n1), make([]float64, n2)
		for i := range y {
			if keep[i] {
				s1[fe1[i]] += y[i]
				s2[fe2[i]] += y[i]
			}
		}
		changed := false
		for i := range y {
			if keep[i] && (s1[fe1[i]] == 0 || s2[fe2[i]] == 0) {
				keep[i] = false
				changed = true
			}
		}
		if !changed {
			break
		}
	}
	has1, has2 := make([]bool, n1), make([]bool, n2)
	for i := range y {
		if keep[i] {
			has1[fe1[i]], has2[fe2[i]] = true, true
		}
	}
	for g := range n1 {
		if had1[g] && !has1[g] {
			fit.Dropped1++
		}
	}
	for g := range n2 {
		if had2[g] && !has2[g] {
			fit.Dropped2++
		}
	}
	// compact the kept observations
	var idx []int
	for i, k := range keep {
		if k {
			idx = append(idx, i)
		}
	}
	m := len(idx)
	if m == 0 {
		return nil, errors.New("every observation is zero within its fixed-effect group")
	}
	yy, ww := make([]float64, m), make([]float64, m)
	f1, f2 := make([]int, m), make([]int, m)
	c := make([]int, m)
	xx := make([][]float64, k)
	for j := range xx {
		xx[j] = make([]float64, m)
	}
	used1, used2 := map[int]bool{}, map[int]bool{}
	ymean := 0.0
	for r, i := range idx {
		yy[r], ww[r], f1[r], f2[r], c[r] = y[i], w[i], fe1[i], fe2[i], cl[i]
		for j := range xx {
			xx[j][r] = x[j][i]
		}
		used1[fe1[i]], used2[fe2[i]] = true, true
		ymean += y[i]
	}
	ymean /= float64(m)
	kParams := k + len(used1) + len(used2) - 1
	if m <= kParams {
		return nil, fmt.Errorf("%d observations for %d parameters", m, kParams)
	}
	ap := newTwoWay(f1, n1, f2, n2)
	mu := make([]float64, m)
	eta := make([]float64, m)
	for i := range mu {
		mu[i] = (yy[i] + ymean) / 2
		eta[i] = math.Log(mu[i])
	}
	om := make([]float64, m)
	z := make([]float64, m)
	xt := make([][]float64, k)
	for j := range xt {
		xt[j] = make([]float64, m)
	}
	beta := make([]float64, k)
	dev := math.Inf(1)
	var h mat.SymDense
	for iter := 0; ; iter++ {
		for i := range z {
			om[i] = ww[i] * mu[i]
			z[i] = eta[i] + (yy[i]-mu[i])/mu[i]
		}
		ap.setWeights(om)
		zt := append([]float64(nil), z...)
		ap.demean(zt)
		for j := range xt {
			copy(xt[j], xx[j])
			ap.demean(xt[j])
		}
		hh := mat.NewSymDense(k, nil)
		g := make([]float64, k)
		for a := range k {
			for b := a; b < k; b++ {
				s := 0.0
				for i := range om {
					s += om[i] * xt[a][i] * xt[b][i]
				}
				hh.SetSym(a, b, s)
			}
			for i := range om {
				g[a] += om[i] * xt[a][i] * zt[i]
			}
		}
		if err := poisson.InvSym(&h, hh); err != nil {
			return nil, fmt.Errorf("Poisson fixed effects: %w (a regressor is collinear with the fixed effects)", err)
		}
		mat.NewVecDense(k, beta).MulVec(&h, mat.NewVecDense(k, g))
		newDev := 0.0
		for i := range eta {
			r := zt[i]
			for j := range k {
				r -= xt[j][i] * beta[j]
			}
			eta[i] = z[i] - r
			mu[i] = math.Exp(eta[i])
			if yy[i] > 0 {
				newDev += 2 * ww[i] * (yy[i]*math.Log(yy[i]/mu[i]) - (yy[i] - mu[i]))
			} else {
				newDev += 2 * ww[i] * mu[i]
			}
		}
		if !robust.Finite(newDev) {
			return nil, errors.New("Poisson fixed effects: the fit diverged")
		}
		conv := math.Abs(newDev-dev)/(math.Abs(newDev)+0.1) < 1e-13
		dev = newDev
		fit.Iter = iter + 1
		if conv {
			break
		}
		if iter >= 200 {
			return nil, errors.New("Poisson fixed effects: no convergence in 200 iterations")
		}
	}
	// sandwich with the final weights
	for i := range om {
		om[i] = ww[i] * mu[i]
	}
	ap.setWeights(om)
	hh := mat.NewSymDense(k, nil)
	for j := range xt {
		copy(xt[j], xx[j])
		ap.demean(xt[j])
	}
	for a := range k {
		for b := a; b < k; b++ {
			s := 0.0
			for i := range om {
				s += om[i] * xt[a][i] * xt[b][i]
			}
			hh.SetSym(a, b, s)
		}
	}
	if err := poisson.InvSym(&h, hh); err != nil {
		return nil, fmt.Errorf("Poisson fixed effects: %w", err)
	}
	scores := make([]float64, G*k)
	used := make([]bool, G)
	for i := range yy {
		used[c[i]] = true
		for j := range k {
			scores[c[i]*k+j] += ww[i] * xt[j][i] * (yy[i] - mu[i])
		}
	}
	fit.Beta = beta
	fit.Vcov, fit.G = robust.SandwichCR1(&h, scores, used, k, m, kParams)
	if fit.G > 1 {
		fit.Adj = float64(fit.G) / float64(fit.G-1) * float64(m-1) / float64(m-kParams)
	}
	fit.A = make([][]float64, k)
	for j := range k {
		fit.A[j] = make([]float64, G)
		for g := range G {
			for l := range k {
				fit.A[j][g] += h.At(j, l) * scores[g*k+l]
			}
		}
	}
	fit.NObs = m
	fit.Mu = make([]float64, n)
	for r, i := range idx {
		fit.Mu[i] = mu[r]
	}
	return fit, nil
}

// twoWay removes two sets of weighted group means by alternating projections.
type twoWay struct {
	f1, f2   []int
	n1, n2   int
	w        []float64
	sw1, sw2 []float64
	s1, s2   []float64
}

func newTwoWay(f1 []int, n1 int, f2 []int, n2 int) *twoWay {
	return &twoWay{f1: f1, f2: f2, n1: n1, n2: n2, sw1: make([]float64, n1), sw2: make([]float64, n2),
		s1: make([]float64, n1), s2: make([]float64, n2)}
}

func (a *twoWay) setWeights(w []float64) {
	a.w = w
	clear(a.sw1)
	clear(a.sw2)
	for i, wi := range w {
		a.sw1[a.f1[i]] += wi
		a.sw2[a.f2[i]] += wi
	}
}

// demean projects v off both sets of group indicators (weighted), to a
// relative tolerance of 1e-13 of v's scale.
func (a *twoWay) demean(v []float64) {
	scale := 0.0
	for _, x := range v {
		scale = max(scale, math.Abs(x))
	}
	if scale == 0 {
		return
	}
	tol := 1e-13 * scale
	for sweep := 0; sweep < 10000; sweep++ {
		clear(a.s1)
		for i, x := range v {
			a.s1[a.f1[i]] += a.w[i] * x
		}
		for i := range v {
			if sw := a.sw1[a.f1[i]]; sw > 0 {
				v[i] -= a.s1[a.f1[i]] / sw
			}
		}
		clear(a.s2)
		for i, x := range v {
			a.s2[a.f2[i]] += a.w[i] * x
		}
		delta := 0.0
		for g, s := range a.s2 {
			if a.sw2[g] > 0 {
				a.s2[g] = s / a.sw2[g]
				delta = max(delta, math.Abs(a.s2[g]))
			}
		}
		for i := range v {
			v[i] -= a.s2[a.f2[i]]
		}
		if delta < tol {
			return
		}
	}
}
