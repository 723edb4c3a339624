package poisson

import (
	"errors"
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/mat"
)

// ErrSingular marks a design whose Hessian cannot be inverted: the
// treatment is indistinguishable from the fixed effects.
var ErrSingular = errors.New("singular design")

// Fit is a Poisson fixed-effects fit.
type Fit struct {
	Beta     []float64
	Vcov     *mat.SymDense // CR1
	A        [][]float64   // A[j][g]: cluster contribution H⁻¹ s̃_g to β_j
	G        int           // clusters used
	Adj      float64       // CR1 factor
	NObs     int
	Dropped1 int // stacked units dropped (no counts)
	Dropped2 int // stack months dropped (no counts)
	Iter     int
	Mu       []float64     // fitted means of the kept observations (dummy-variable fits; 0 for dropped)
	Keep     []bool        // observations kept (dummy-variable fits)
	KParams  int           // parameters, fixed effects included
	Scores   *mat.Dense    // used clusters × K: score sums with the fixed effects partialled out
	Hess     *mat.SymDense // K×K: minus the Hessian of β with the fixed effects partialled out
}

// Block is one stacked unit: rows [Start, Start+N) of the stacked
// arrays, months with fixed effects TOff..TOff+N−1 of its stack.
type Block struct{ Start, N, TOff int }

// FitStacked fits the Poisson model with one fixed effect per block
// (stacked unit), one per stack month and the regressors x[j] (each as long
// as y), by Newton's method on the likelihood with the unit effects
// concentrated out: given the rest, a unit's effect is
// log(Σ_t y / Σ_t exp(γ_t + x'β)), which turns each unit's counts into a
// multinomial over its months (Hausman, Hall & Griliches 1984). The month
// effects of a stack only meet that stack's units, so the Hessian is block
// diagonal plus a border for β and each Newton step costs one pass over the
// data. The estimate, scores and CR1 variance are those of the full
// dummy-variable fit (audit/did's tests compare the two; the dummy-variable
// fit is checked against R's glm).
func FitStacked(y []float64, x [][]float64, w []float64, cl []int, G int, blocks []Block, nMonths int) (*Fit, error) {
	return FitStackedAt(y, x, w, cl, G, blocks, nMonths, nil)
}

// FitStackedAt is FitStacked with β held at fixed when fixed
// is not nil (the restricted fit of a score test: only the fixed effects
// move). Its scores and Hessian are then those at the restricted estimate.
func FitStackedAt(y []float64, x [][]float64, w []float64, cl []int, G int, blocks []Block, nMonths int, fixed []float64) (*Fit, error) {
	K := len(x)
	// drop blocks with no counts, then stack months with no counts
	var keep []Block
	fit := &Fit{}
	monthSum := make([]float64, nMonths)
	for _, b := range blocks {
		n := 0.0
		for i := range b.N {
			n += y[b.Start+i]
		}
		if n == 0 || w[b.Start] <= 0 {
			if w[b.Start] > 0 {
				fit.Dropped1++
			}
			continue
		}
		keep = append(keep, b)
		for i := range b.N {
			monthSum[b.TOff+i] += y[b.Start+i]
		}
	}
	if len(keep) < 2 {
		return nil, errors.New("fewer than 2 stacked units with any count")
	}
	// free month parameters: per stack the first active month is fixed at 0
	free := make([]int, nMonths) // index into the stack's free list, −1 fixed, −2 inactive
	type stack struct{ off, n, m int }
	stacks := map[int]*stack{}
	var order []int
	for _, b := range keep {
		if _, ok := stacks[b.TOff]; !ok {
			stacks[b.TOff] = &stack{off: b.TOff, n: b.N}
			order = append(order, b.TOff)
		}
	}
	activeMonths := 0
	for _, off := range order {
		s := stacks[off]
		first := true
		for t := s.off; t < s.off+s.n; t++ {
			switch {
			case monthSum[t] == 0:
				free[t] = -2
				fit.Dropped2++
			case first:
				free[t] = -1
				first = false
				activeMonths++
			default:
				free[t] = s.m
				s.m++
				activeMonths++
			}
		}
	}
	gam := make([]float64, nMonths)
	for t := range gam {
		if free[t] == -2 {
			continue
		}
		gam[t] = math.Log(monthSum[t])
	}
	for _, off := range order { // normalise so the fixed month is 0
		s := stacks[off]
		base := 0.0
		for t := s.off; t < s.off+s.n; t++ {
			if free[t] == -1 {
				base = gam[t]
			}
		}
		for t := s.off; t < s.off+s.n; t++ {
			gam[t] -= base
		}
	}
	beta := make([]float64, K)
	copy(beta, fixed)
	maxN := 0
	for _, b := range keep {
		maxN = max(maxN, b.N)
	}
	pi := make([]float64, maxN)
	xbar := make([]float64, K)
	// loglik returns the concentrated log likelihood at (gam, beta).
	loglik := func(gam, beta []float64) float64 {
		ll := 0.0
		for _, b := range keep {
			blockProbs(b, gam, beta, x, free, pi)
			for i := range b.N {
				if yv := y[b.Start+i]; yv > 0 {
					ll += w[b.Start] * yv * math.Log(pi[i])
				}
			}
		}
		return ll
	}
	// derivatives at the current point
	A := map[int]*mat.SymDense{}
	gG := map[int][]float64{}
	B := map[int][]float64{} // m×K row-major
	gB := make([]float64, K)
	C := mat.NewSymDense(K, nil)
	deriv := func() {
		clear(gB)
		C.Zero()
		for _, off := range order {
			m := stacks[off].m
			if A[off] == nil {
				A[off] = mat.NewSymDense(max(m, 1), nil)
			} else {
				A[off].Zero()
			}
			gG[off] = make([]float64, m)
			B[off] = make([]float64, m*K)
		}
		for _, b := range keep {
			blockProbs(b, gam, beta, x, free, pi)
			n := 0.0
			for i := range b.N {
				n += y[b.Start+i]
			}
			wu := w[b.Start]
			clear(xbar)
			for j := range K {
				for i := range b.N {
					xbar[j] += pi[i] * x[j][b.Start+i]
				}
			}
			a := A[b.TOff].RawSymmetric()
			gg, bb := gG[b.TOff], B[b.TOff]
			for i := range b.N {
				fi := free[b.TOff+i]
				r := y[b.Start+i] - n*pi[i]
				for j := range K {
					gB[j] += wu * x[j][b.Start+i] * r
				}
				if fi < 0 {
					continue
				}
				gg[fi] += wu * r
				for j := range K {
					bb[fi*K+j] += wu * n * pi[i] * (x[j][b.Start+i] - xbar[j])
				}
				row := a.Data[fi*a.Stride:]
				row[fi] += wu * n * pi[i]
				for j := i; j < b.N; j++ {
					if fj := free[b.TOff+j]; fj >= 0 {
						row[fj] -= wu * n * pi[i] * pi[j]
					}
				}
			}
			c := C.RawSymmetric()
			for j := range K {
				for k := j; k < K; k++ {
					s := 0.0
					for i := range b.N {
						s += pi[i] * x[j][b.Start+i] * x[k][b.Start+i]
					}
					c.Data[j*c.Stride+k] += wu * n * (s - xbar[j]*xbar[k])
				}
			}
		}
	}
	// solve returns the Newton step (dB, dG), the Schur complement of the
	// month effects in the β block and Q = A⁻¹B per stack (m×K row-major).
	solve := func() (dB []float64, dG map[int][]float64, schur *mat.SymDense, q map[int][]float64, err error) {
		q = map[int][]float64{}
		rg := map[int][]float64{}
		schur = mat.NewSymDense(K, nil)
		schur.CopySym(C)
		num := slices.Clone(gB)
		for _, off := range order {
			m := stacks[off].m
			if m == 0 {
				continue
			}
			var ch mat.Cholesky
			if !ch.Factorize(A[off]) {
				return nil, nil, nil, nil, fmt.Errorf("stacked Poisson: month effects of a stack: %w", ErrSingular)
			}
			qm := mat.NewDense(m, K, nil)
			if err := ch.SolveTo(qm, mat.NewDense(m, K, B[off])); err != nil {
				return nil, nil, nil, nil, ErrSingular
			}
			rv := mat.NewVecDense(m, nil)
			if err := ch.SolveVecTo(rv, mat.NewVecDense(m, gG[off])); err != nil {
				return nil, nil, nil, nil, ErrSingular
			}
			q[off], rg[off] = qm.RawMatrix().Data, rv.RawVector().Data
			bo, qo := B[off], q[off]
			for j := range K {
				for k := j; k < K; k++ {
					s := 0.0
					for i := range m {
						s += bo[i*K+j] * qo[i*K+k]
					}
					schur.SetSym(j, k, schur.At(j, k)-s)
				}
				for i := range m {
					num[j] -= bo[i*K+j] * rg[off][i]
				}
			}
		}
		var ch mat.Cholesky
		if !ch.Factorize(schur) {
			return nil, nil, nil, nil, fmt.Errorf("stacked Poisson: %w (treatment indistinguishable from the fixed effects)", ErrSingular)
		}
		for j := range K {
			if !(schur.At(j, j) > 1e-12*max(C.At(j, j), 1e-300)) {
				return nil, nil, nil, nil, fmt.Errorf("stacked Poisson: %w (treatment indistinguishable from the fixed effects)", ErrSingular)
			}
		}
		dv := mat.NewVecDense(K, nil)
		if err := ch.SolveVecTo(dv, mat.NewVecDense(K, num)); err != nil {
			return nil, nil, nil, nil, ErrSingular
		}
		dB = dv.RawVector().Data
		if fixed != nil {
			clear(dB)
		}
		dG = map[int][]float64{}
		for _, off := range order {
			m := stacks[off].m
			dg := make([]float64, m)
			for i := range m {
				dg[i] = rg[off][i]
				for j := range K {
					dg[i] -= q[off][i*K+j] * dB[j]
				}
			}
			dG[off] = dg
		}
		return dB, dG, schur, q, nil
	}
	ll := loglik(gam, beta)
	newGam := make([]float64, nMonths)
	newBeta := make([]float64, K)
	for iter := 0; ; iter++ {
		deriv()
		dB, dG, _, _, err := solve()
		if err != nil {
			return nil, err
		}
		step := 1.0
		maxStep := 0.0
		for _, v := range dB {
			maxStep = max(maxStep, math.Abs(v))
		}
		for _, dg := range dG {
			for _, v := range dg {
				maxStep = max(maxStep, math.Abs(v))
			}
		}
		for {
			copy(newGam, gam)
			for _, off := range order {
				s := stacks[off]
				for t := s.off; t < s.off+s.n; t++ {
					if fi := free[t]; fi >= 0 {
						newGam[t] += step * dG[off][fi]
					}
				}
			}
			for j := range K {
				newBeta[j] = beta[j] + step*dB[j]
			}
			nl := loglik(newGam, newBeta)
			if nl >= ll-1e-12*math.Abs(ll) || step < 1e-8 {
				ll = nl
				break
			}
			step /= 2
		}
		copy(gam, newGam)
		copy(beta, newBeta)
		fit.Iter = iter + 1
		if maxStep*step < 1e-11 {
			break
		}
		if iter >= 100 || slices.ContainsFunc(beta, func(v float64) bool { return math.IsNaN(v) || math.IsInf(v, 0) }) {
			return nil, errors.New("stacked Poisson: no convergence in 100 Newton steps")
		}
	}
	// sandwich at the optimum: unit scores with the month effects partialled out
	deriv()
	_, _, schur, q, err := solve()
	if err != nil {
		return nil, err
	}
	sc := make([]float64, G*K)
	used := make([]bool, G)
	nObs := 0
	s := make([]float64, K)
	for _, b := range keep {
		blockProbs(b, gam, beta, x, free, pi)
		n := 0.0
		for i := range b.N {
			n += y[b.Start+i]
		}
		wu := w[b.Start]
		clear(s)
		for i := range b.N {
			fi := free[b.TOff+i]
			if fi == -2 {
				continue
			}
			nObs++
			r := wu * (y[b.Start+i] - n*pi[i])
			for j := range K {
				s[j] += x[j][b.Start+i] * r
				if fi >= 0 {
					s[j] -= q[b.TOff][fi*K+j] * r
				}
			}
		}
		c := cl[b.Start]
		for j := range K {
			sc[c*K+j] += s[j]
		}
		used[c] = true
	}
	kParams := K + len(keep) + activeMonths - 1
	Gu := 0
	for _, u := range used {
		if u {
			Gu++
		}
	}
	if Gu < 2 || nObs <= kParams {
		return nil, fmt.Errorf("stacked Poisson: %d clusters, %d observations for %d parameters", Gu, nObs, kParams)
	}
	var sInv mat.SymDense
	if err := InvSym(&sInv, schur); err != nil {
		return nil, fmt.Errorf("stacked Poisson: %w", err)
	}
	fit.Adj = float64(Gu) / float64(Gu-1) * float64(nObs-1) / float64(nObs-kParams)
	fit.Beta = beta
	fit.KParams = kParams
	fit.Hess = schur
	fit.Scores = mat.NewDense(Gu, K, nil)
	for g, row := 0, 0; g < G; g++ {
		if used[g] {
			fit.Scores.SetRow(row, sc[g*K:(g+1)*K])
			row++
		}
	}
	fit.G = Gu
	fit.NObs = nObs
	fit.A = make([][]float64, K)
	for j := range K {
		fit.A[j] = make([]float64, G)
	}
	meat := mat.NewSymDense(K, nil)
	for g, u := range used {
		if !u {
			continue
		}
		meat.SymRankOne(meat, 1, mat.NewVecDense(K, sc[g*K:(g+1)*K]))
		for j := range K {
			v := 0.0
			for k := range K {
				v += sInv.At(j, k) * sc[g*K+k]
			}
			fit.A[j][g] = v
		}
	}
	var tmp, v mat.Dense
	tmp.Mul(&sInv, meat)
	v.Mul(&tmp, &sInv)
	fit.Vcov = mat.NewSymDense(K, nil)
	for j := range K {
		for k := j; k < K; k++ {
			fit.Vcov.SetSym(j, k, fit.Adj*(v.At(j, k)+v.At(k, j))/2)
		}
	}
	return fit, nil
}

// blockProbs writes the block's multinomial month probabilities into pi.
func blockProbs(b Block, gam, beta []float64, x [][]float64, free []int, pi []float64) {
	mx := math.Inf(-1)
	for i := range b.N {
		if free[b.TOff+i] == -2 {
			continue
		}
		pi[i] = gam[b.TOff+i]
		for j, bj := range beta {
			pi[i] += bj * x[j][b.Start+i]
		}
		mx = max(mx, pi[i])
	}
	z := 0.0
	for i := range b.N {
		if free[b.TOff+i] == -2 {
			pi[i] = 0
			continue
		}
		pi[i] = math.Exp(pi[i] - mx)
		z += pi[i]
	}
	for i := range b.N {
		pi[i] /= z
	}
}

// InvSym inverts a symmetric positive definite matrix by Cholesky, reporting
// ErrSingular when it is not (numerically) positive definite (condition
// number above 1e13). audit/did's Wald tests use it too.
func InvSym(dst *mat.SymDense, a *mat.SymDense) error {
	var ch mat.Cholesky
	if ok := ch.Factorize(a); !ok {
		return ErrSingular
	}
	if c := ch.Cond(); c > 1e13 || math.IsNaN(c) || math.IsInf(c, 0) {
		return ErrSingular
	}
	return ch.InverseTo(dst)
}
