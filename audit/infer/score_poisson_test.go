package infer

import (
	"context"
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
)

// Test-local Poisson fitters for the score bootstrap: a dense one with fixed
// effects as dummy columns (the oracle, checked against R's glm), and a
// panel one with the unit effects concentrated out (fast enough for the
// simulations, checked against the dense one).

// scoreNewtonKKT maximises a concave objective subject to a'θ = b0 by Newton
// steps on the Lagrangian's first-order conditions
//
//	[H a; a' 0][Δ; λ] = [g; b0 − a'θ]
//
// with step halving on the objective. eval returns ℓ, ∂ℓ/∂θ and −∂²ℓ/∂θ∂θ'.
func scoreNewtonKKT(eval func(theta []float64) (float64, []float64, *mat.SymDense), a []float64, b0 float64, theta []float64) ([]float64, error) {
	k := len(theta)
	th := append([]float64(nil), theta...)
	// project the start onto the restriction
	aa, at := 0.0, 0.0
	for j := range a {
		aa += a[j] * a[j]
		at += a[j] * th[j]
	}
	for j := range a {
		th[j] -= a[j] * (at - b0) / aa
	}
	ll, g, h := eval(th)
	kkt := mat.NewDense(k+1, k+1, nil)
	rhs := mat.NewVecDense(k+1, nil)
	sol := mat.NewVecDense(k+1, nil)
	next := make([]float64, k)
	for iter := 0; iter < 200; iter++ {
		for i := range k {
			for j := range k {
				kkt.Set(i, j, h.At(i, j))
			}
			kkt.Set(i, k, a[i])
			kkt.Set(k, i, a[i])
			rhs.SetVec(i, g[i])
		}
		kkt.Set(k, k, 0)
		r := b0
		for j := range a {
			r -= a[j] * th[j]
		}
		rhs.SetVec(k, r)
		if err := sol.SolveVec(kkt, rhs); err != nil {
			return nil, fmt.Errorf("Newton step: %w", err)
		}
		step, size := 1.0, 0.0
		for j := range k {
			size = max(size, math.Abs(sol.AtVec(j)))
		}
		for {
			for j := range k {
				next[j] = th[j] + step*sol.AtVec(j)
			}
			nl, ng, nh := eval(next)
			if nl >= ll-1e-12*math.Abs(ll) || step < 1e-10 {
				ll, g, h = nl, ng, nh
				copy(th, next)
				break
			}
			step /= 2
		}
		if size*step < 1e-11 {
			return th, nil
		}
	}
	return nil, errors.New("no convergence in 200 Newton steps")
}

// scoreDense is a Poisson regression y ~ X with clusters.
type scoreDense struct {
	x  *mat.Dense
	y  []float64
	cl []int // cluster of each row, in [0, g)
	g  int
}

// eval returns the Poisson log likelihood (without log y!), score and
// information at beta.
func (d *scoreDense) eval(beta []float64) (float64, []float64, *mat.SymDense) {
	n, k := d.x.Dims()
	ll := 0.0
	g := make([]float64, k)
	h := mat.NewSymDense(k, nil)
	raw := h.RawSymmetric()
	for i := range n {
		row := d.x.RawRowView(i)
		eta := 0.0
		for j, v := range row {
			eta += v * beta[j]
		}
		mu := math.Exp(eta)
		ll += d.y[i]*eta - mu
		for j, v := range row {
			if v == 0 {
				continue
			}
			g[j] += v * (d.y[i] - mu)
			for l := j; l < k; l++ {
				raw.Data[j*raw.Stride+l] += mu * v * row[l]
			}
		}
	}
	return ll, g, h
}

// fit is a ScoreFitter: start is the intercept column (set to log ȳ).
func (d *scoreDense) fitter(intercept int) ScoreFitter {
	return func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
		n, k := d.x.Dims()
		th := make([]float64, k)
		ym := 0.0
		for _, v := range d.y {
			ym += v / float64(n)
		}
		th[intercept] = math.Log(ym)
		beta, err := scoreNewtonKKT(d.eval, a, b0, th)
		if err != nil {
			return ScoreFit{}, err
		}
		_, _, h := d.eval(beta)
		return ScoreFit{Scores: d.scores(beta), Hessian: h, NObs: n, NParams: k}, nil
	}
}

// scores returns the cluster score sums at beta.
func (d *scoreDense) scores(beta []float64) *mat.Dense {
	n, k := d.x.Dims()
	s := mat.NewDense(d.g, k, nil)
	for i := range n {
		row := d.x.RawRowView(i)
		eta := 0.0
		for j, v := range row {
			eta += v * beta[j]
		}
		r := d.y[i] - math.Exp(eta)
		sr := s.RawRowView(d.cl[i])
		for j, v := range row {
			sr[j] += v * r
		}
	}
	return s
}

// scorePanel is a Poisson panel y_ut ~ exp(α_u + γ_t + β·d_ut) with one
// cluster per unit; θ = (β, γ_1, ..., γ_{T−1}), γ_0 = 0. The unit effects
// are concentrated out: each unit's counts are multinomial over its months
// (Hausman, Hall & Griliches 1984), whose score and information in θ equal
// the dummy-variable fit's with the unit effects partialled out.
type scorePanel struct {
	y, d [][]float64 // [unit][month]
}

func (p *scorePanel) eval(theta []float64) (float64, []float64, *mat.SymDense) {
	T := len(p.y[0])
	k := T // β and T−1 month effects
	ll := 0.0
	g := make([]float64, k)
	h := mat.NewSymDense(k, nil)
	raw := h.RawSymmetric()
	pi := make([]float64, T)
	zbar := make([]float64, k)
	for u := range p.y {
		n := p.unitScore(u, theta, pi, g, nil)
		if n == 0 {
			continue
		}
		for t := range T {
			if p.y[u][t] > 0 {
				ll += p.y[u][t] * math.Log(pi[t])
			}
		}
		// information n (Σ π z z' − z̄ z̄'), z_t = (d_t, e_t)
		clear(zbar)
		for t := range T {
			zbar[0] += pi[t] * p.d[u][t]
			if t > 0 {
				zbar[t] += pi[t]
			}
		}
		for t := range T {
			z0 := p.d[u][t]
			raw.Data[0] += n * pi[t] * z0 * z0
			if t > 0 {
				raw.Data[t] += n * pi[t] * z0
				raw.Data[t*raw.Stride+t] += n * pi[t]
			}
		}
		for i := range k {
			for j := i; j < k; j++ {
				raw.Data[i*raw.Stride+j] -= n * zbar[i] * zbar[j]
			}
		}
	}
	return ll, g, h
}

// unitScore writes unit u's month probabilities into pi, adds its score to
// g (and to row s when non-nil) and returns its total count.
func (p *scorePanel) unitScore(u int, theta, pi, g, s []float64) float64 {
	T := len(p.y[u])
	n := 0.0
	mx := math.Inf(-1)
	for t := range T {
		n += p.y[u][t]
		e := theta[0] * p.d[u][t]
		if t > 0 {
			e += theta[t]
		}
		pi[t] = e
		mx = max(mx, e)
	}
	z := 0.0
	for t := range T {
		pi[t] = math.Exp(pi[t] - mx)
		z += pi[t]
	}
	for t := range T {
		pi[t] /= z
	}
	if n == 0 {
		return 0
	}
	for t := range T {
		r := p.y[u][t] - n*pi[t]
		g[0] += r * p.d[u][t]
		if s != nil {
			s[0] += r * p.d[u][t]
		}
		if t > 0 {
			g[t] += r
			if s != nil {
				s[t] += r
			}
		}
	}
	return n
}

// fitter returns a ScoreFitter clustering by unit; units with no counts
// carry no information and are left out of the clusters. N and K count the
// dummy-variable model's observations and parameters over the kept units.
func (p *scorePanel) fitter() ScoreFitter {
	return func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
		T := len(p.y[0])
		th := make([]float64, T)
		theta, err := scoreNewtonKKT(p.eval, a, b0, th)
		if err != nil {
			return ScoreFit{}, err
		}
		_, _, h := p.eval(theta)
		var rows []float64
		pi := make([]float64, T)
		g := make([]float64, T)
		kept := 0
		for u := range p.y {
			s := make([]float64, T)
			if p.unitScore(u, theta, pi, g, s) == 0 {
				continue
			}
			kept++
			rows = append(rows, s...)
		}
		return ScoreFit{Scores: mat.NewDense(kept, T, rows), Hessian: h, NObs: kept * T, NParams: T + kept}, nil
	}
}
