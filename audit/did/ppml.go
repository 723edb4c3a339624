package did

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/loadwake/loadwake/audit/panel"
	"gonum.org/v1/gonum/mat"
)

// Poisson pseudo-maximum likelihood with two sets of fixed effects
// (Santos Silva & Tenreyro 2006, REStat 88(4); Wooldridge 1999, J.
// Econometrics 90(1)): E[y | ·] = exp(α_a + γ_b + x'β). The estimate is
// consistent whenever the conditional mean is right, whatever the
// distribution of the counts, and handles zeros without log(y+1) tricks.
//
// The fit never builds dummy columns: each iteratively reweighted least
// squares step removes both fixed effects from the working response and the
// regressors by weighted alternating projections (the method of alternating
// projections of Gaure 2013 and of ppmlhdfe, Correia, Guimarães & Zylkin
// 2020), so memory grows with observations, not with units × months.
// Groups whose outcome is zero throughout have an estimate of −∞ and carry no
// information on β; they are dropped first (repeatedly, as dropping one
// set's groups can empty the other's) and counted.
//
// Variance: the sandwich on the partialled-out regressors, clustered, with
// the CR1 factor G/(G−1)·(N−1)/(N−K) where K counts β and both sets of
// fixed effects (as R's glm with factor dummies and sandwich::vcovCL
// type "HC1" would). With few treated clusters a wild score bootstrap
// (Kline & Santos 2012, J. Econometric Methods 1(1)) perturbs the cluster
// scores with Rademacher or Webb weights (bootstrap-t).

// ppmlFit is a Poisson fixed-effects fit.
type ppmlFit struct {
	beta     []float64
	vcov     *mat.SymDense // CR1
	a        [][]float64   // a[j][g]: cluster contribution H⁻¹ s̃_g to β_j
	g        int           // clusters used
	adj      float64       // CR1 factor
	nObs     int
	dropped1 int // fe1 groups dropped (all zero)
	dropped2 int // fe2 groups dropped
	iter     int
	mu       []float64 // fitted means of the kept observations (nil entries for dropped: 0)
	keep     []bool
}

// scoreBootstrap runs the wild score bootstrap-t for coefficient j: Δ* = Σ
// v_g a_g, se* = √(adj Σ (v_g a_g)²). It returns the 95% quantile of |t*| and
// the p-value P(|t*| ≥ |β/se|).
func (f *ppmlFit) scoreBootstrap(j, draws int, rng *rand.Rand) (q, p float64) {
	_, webb := bootName(f.g)
	a := f.a[j]
	v := make([]float64, len(a))
	se := math.Sqrt(f.vcov.At(j, j))
	t0 := math.Abs(f.beta[j] / se)
	ts := make([]float64, 0, draws)
	hits := 0
	for range draws {
		bootWeights(rng, v, webb)
		d, ss := 0.0, 0.0
		for g, ag := range a {
			d += v[g] * ag
			ss += v[g] * v[g] * ag * ag
		}
		if ss <= 0 {
			continue
		}
		t := math.Abs(d / math.Sqrt(ss))
		ts = append(ts, t)
		if t >= t0 {
			hits++
		}
	}
	if len(ts) == 0 {
		return critical(0, f.g), 1
	}
	return quantile(ts, 0.95), float64(hits+1) / float64(len(ts)+1)
}

// stacked is the cohort-stacked design of one outcome.
type stacked struct {
	y, d, w                   []float64
	f1, f2, cl                []int
	n1, n2                    int
	blocks                    []ppmlBlock
	tUnits, cUnits, tClusters map[int]bool
	postSum, postN            float64
	cohorts                   []int
}

// stackPanel builds the stacked arrays: per cohort its units and the
// never-treated controls over the cohort's window. With shift > 0 it builds
// the placebo design instead: months before the real start only, the
// treated dummy switched on shift months early.
func stackPanel(p *panel.Panel, y []float64, cl []int, win Window, shift int) *stacked {
	T := p.Months
	cohorts := cohortsOf(p)
	size, nCtl := map[int]int{}, 0
	for _, un := range p.Units {
		if un.Weight > 0 {
			if un.FirstTreated >= 0 {
				size[un.FirstTreated]++
			} else {
				nCtl++
			}
		}
	}
	rows, nb := 0, 0
	for _, g := range cohorts {
		rows += (size[g] + nCtl) * max(0, min(T, g+win.Post)-max(0, g-win.Pre))
		nb += size[g] + nCtl
	}
	yy, d, w := make([]float64, 0, rows), make([]float64, 0, rows), make([]float64, 0, rows)
	f1, f2, cc := make([]int, 0, rows), make([]int, 0, rows), make([]int, 0, rows)
	blocks := make([]ppmlBlock, 0, nb)
	n1, n2 := 0, 0
	tUnits, cUnits, tClusters := map[int]bool{}, map[int]bool{}, map[int]bool{}
	postSum, postN := 0.0, 0.0
	for _, g := range cohorts {
		lo, hi := max(0, g-win.Pre), min(T, g+win.Post)
		start := g
		if shift > 0 {
			hi, start = g, g-shift
		}
		if start-lo < 1 || hi <= start {
			continue
		}
		for u, un := range p.Units {
			if un.Weight <= 0 || (un.FirstTreated != g && un.FirstTreated != -1) {
				continue
			}
			tr := un.FirstTreated == g
			blocks = append(blocks, ppmlBlock{start: len(yy), n: hi - lo, tOff: n2})
			for t := lo; t < hi; t++ {
				v := y[u*T+t]
				yy = append(yy, v)
				if tr && t >= start {
					d = append(d, 1)
					postSum += v
					postN++
				} else {
					d = append(d, 0)
				}
				w = append(w, un.Weight)
				f1 = append(f1, n1)
				f2 = append(f2, n2+t-lo)
				cc = append(cc, cl[u])
			}
			n1++
			if tr {
				tUnits[u] = true
				tClusters[cl[u]] = true
			} else {
				cUnits[u] = true
			}
		}
		n2 += hi - lo
	}
	return &stacked{y: yy, d: d, w: w, f1: f1, f2: f2, cl: cc, n1: n1, n2: n2, blocks: blocks,
		tUnits: tUnits, cUnits: cUnits, tClusters: tClusters, postSum: postSum, postN: postN, cohorts: cohorts}
}

// stackedPPML estimates the effect on outcome y with a Poisson regression
// stacked by cohort: for each cohort g the cohort's units and the
// never-treated controls in months [g−Pre, g+Post), with stack-specific unit
// and month fixed effects and one treated×post regressor (a "clean controls"
// stacked design, as in Cengiz, Dube, Lindner & Zipperer 2019).
func stackedPPML(p *panel.Panel, y []float64, cl []int, G int, opts Options, rng *rand.Rand) (*estimate, error) {
	st := stackPanel(p, y, cl, opts.Window, 0)
	tUnits, cUnits, tClusters, cohorts := st.tUnits, st.cUnits, st.tClusters, st.cohorts
	postSum, postN := st.postSum, st.postN
	if len(tUnits) < 2 || len(cUnits) < 2 {
		return nil, fmt.Errorf("%d treated and %d control units in the stacked windows; need at least 2 of each", len(tUnits), len(cUnits))
	}
	fit, err := fitStackedPoisson(st.y, st.d, st.w, st.cl, G, st.blocks, st.n2)
	if err != nil {
		return nil, err
	}
	b := fit.beta[0]
	se := math.Sqrt(fit.vcov.At(0, 0))
	if !(se > 0) {
		return nil, errSingular
	}
	tc := len(tClusters)
	e := &estimate{treatedUnits: len(tUnits), controlUnits: len(cUnits)}
	var lo, hi float64
	if opts.useBootstrap(tc) {
		name, _ := bootName(fit.g)
		q, pv := fit.scoreBootstrap(0, opts.Draws, rng)
		lo, hi, e.p = b-q*se, b+q*se, pv
		e.method = fmt.Sprintf("wild-score-bootstrap-%s-%d", name, opts.Draws)
	} else {
		c := critical(tc, fit.g)
		lo, hi, e.p = b-c*se, b+c*se, pTwoSided(b/se, tc, fit.g)
		e.method = analyticName(tc, fit.g)
	}
	M := postSum / postN
	e.att = M * (1 - math.Exp(-b))
	e.se = M * math.Exp(-b) * se
	e.lo, e.hi = M*(1-math.Exp(-lo)), M*(1-math.Exp(-hi))
	e.hasRel, e.rel, e.relLo, e.relHi = true, math.Expm1(b), math.Expm1(lo), math.Expm1(hi)
	e.note = fmt.Sprintf("Poisson PML stacked by cohort (%d stacks, window %d months before, %d after), stack-specific unit and month fixed effects; b = %.4g log points; att = treated post mean x (1 - exp(-b))",
		len(cohorts), opts.Window.Pre, opts.Window.Post, b)
	if fit.dropped1 > 0 {
		e.note += fmt.Sprintf("; %d stacked unit(s) with all-zero outcome dropped (no information under unit fixed effects)", fit.dropped1)
	}
	// pre-trend: the same model on months before the real starts, treated
	// switched on PlaceboShift months early; a one-degree-of-freedom test.
	if pl := stackPanel(p, y, cl, opts.Window, opts.PlaceboShift); len(pl.tUnits) >= 2 && len(pl.cUnits) >= 2 {
		if pf, err := fitStackedPoisson(pl.y, pl.d, pl.w, pl.cl, G, pl.blocks, pl.n2); err == nil {
			pse := math.Sqrt(pf.vcov.At(0, 0))
			if pse > 0 {
				ptc := len(pl.tClusters)
				if opts.useBootstrap(ptc) {
					_, e.preP = pf.scoreBootstrap(0, opts.Draws, rng)
				} else {
					e.preP = pTwoSided(pf.beta[0]/pse, ptc, pf.g)
				}
				e.hasPre = true
				e.note += fmt.Sprintf("; pre_trend_p from the same model on pre-start months with starts %d months early", opts.PlaceboShift)
			}
		}
	}
	return e, nil
}

// ppmlBlock is one stacked unit: rows [start, start+n) of the stacked
// arrays, months with fixed effects tOff..tOff+n−1 of its stack.
type ppmlBlock struct{ start, n, tOff int }

// fitStackedPoisson fits the Poisson model with one fixed effect per block
// (stacked unit), one per stack month and the single regressor d, by
// Newton's method on the likelihood with the unit effects concentrated out:
// given the rest, a unit's effect is log(Σ_t y / Σ_t exp(γ_t + βd)), which
// turns each unit's counts into a multinomial over its months (Hausman, Hall &
// Griliches 1984). The month effects of a stack only meet that stack's units,
// so the Hessian is block diagonal plus a border for β and each Newton step
// costs one pass over the data. The estimate, scores and CR1 variance are
// those of the full dummy-variable fit (fitPoissonFE; checked in tests).
func fitStackedPoisson(y, d, w []float64, cl []int, G int, blocks []ppmlBlock, nMonths int) (*ppmlFit, error) {
	// drop blocks with no counts, then stack months with no counts
	var keep []ppmlBlock
	fit := &ppmlFit{}
	monthSum := make([]float64, nMonths)
	for _, b := range blocks {
		n := 0.0
		for i := range b.n {
			n += y[b.start+i]
		}
		if n == 0 || w[b.start] <= 0 {
			if w[b.start] > 0 {
				fit.dropped1++
			}
			continue
		}
		keep = append(keep, b)
		for i := range b.n {
			monthSum[b.tOff+i] += y[b.start+i]
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
		if _, ok := stacks[b.tOff]; !ok {
			stacks[b.tOff] = &stack{off: b.tOff, n: b.n}
			order = append(order, b.tOff)
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
				fit.dropped2++
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
	beta := 0.0
	maxN := 0
	for _, b := range keep {
		maxN = max(maxN, b.n)
	}
	pi := make([]float64, maxN)
	// loglik returns the concentrated log likelihood at (gam, beta).
	loglik := func(gam []float64, beta float64) float64 {
		ll := 0.0
		for _, b := range keep {
			mx := math.Inf(-1)
			for i := range b.n {
				if free[b.tOff+i] != -2 {
					mx = max(mx, gam[b.tOff+i]+beta*d[b.start+i])
				}
			}
			z := 0.0
			for i := range b.n {
				if free[b.tOff+i] != -2 {
					z += math.Exp(gam[b.tOff+i] + beta*d[b.start+i] - mx)
				}
			}
			lz := mx + math.Log(z)
			for i := range b.n {
				if yv := y[b.start+i]; yv > 0 {
					ll += w[b.start] * yv * (gam[b.tOff+i] + beta*d[b.start+i] - lz)
				}
			}
		}
		return ll
	}
	// derivatives at the current point
	A := map[int]*mat.SymDense{}
	gG := map[int][]float64{}
	B := map[int][]float64{}
	var gB, cBB float64
	deriv := func() {
		gB, cBB = 0, 0
		for _, off := range order {
			m := stacks[off].m
			if A[off] == nil {
				A[off] = mat.NewSymDense(max(m, 1), nil)
			} else {
				A[off].Zero()
			}
			gG[off] = make([]float64, m)
			B[off] = make([]float64, m)
		}
		for _, b := range keep {
			blockProbs(b, gam, beta, d, free, pi)
			n := 0.0
			for i := range b.n {
				n += y[b.start+i]
			}
			wu := w[b.start]
			xbar := 0.0
			for i := range b.n {
				xbar += pi[i] * d[b.start+i]
			}
			a := A[b.tOff].RawSymmetric()
			gg, bb := gG[b.tOff], B[b.tOff]
			for i := range b.n {
				fi := free[b.tOff+i]
				r := y[b.start+i] - n*pi[i]
				gB += wu * d[b.start+i] * r
				if fi < 0 {
					continue
				}
				gg[fi] += wu * r
				bb[fi] += wu * n * pi[i] * (d[b.start+i] - xbar)
				row := a.Data[fi*a.Stride:]
				row[fi] += wu * n * pi[i]
				for j := i; j < b.n; j++ {
					if fj := free[b.tOff+j]; fj >= 0 {
						row[fj] -= wu * n * pi[i] * pi[j]
					}
				}
			}
			cBB += wu * n * (xbar - xbar*xbar)
		}
	}
	solve := func() (dB float64, dG map[int][]float64, schur float64, q map[int][]float64, err error) {
		q = map[int][]float64{}
		rg := map[int][]float64{}
		schur = cBB
		num := gB
		for _, off := range order {
			m := stacks[off].m
			if m == 0 {
				continue
			}
			var ch mat.Cholesky
			if !ch.Factorize(A[off]) {
				return 0, nil, 0, nil, fmt.Errorf("stacked Poisson: month effects of a stack: %w", errSingular)
			}
			qv := mat.NewVecDense(m, nil)
			if err := ch.SolveVecTo(qv, mat.NewVecDense(m, B[off])); err != nil {
				return 0, nil, 0, nil, errSingular
			}
			rv := mat.NewVecDense(m, nil)
			if err := ch.SolveVecTo(rv, mat.NewVecDense(m, gG[off])); err != nil {
				return 0, nil, 0, nil, errSingular
			}
			q[off], rg[off] = qv.RawVector().Data, rv.RawVector().Data
			for i := range m {
				schur -= B[off][i] * q[off][i]
				num -= B[off][i] * rg[off][i]
			}
		}
		if !(schur > 1e-12*max(cBB, 1e-300)) {
			return 0, nil, 0, nil, fmt.Errorf("stacked Poisson: %w (treatment indistinguishable from the fixed effects)", errSingular)
		}
		dB = num / schur
		dG = map[int][]float64{}
		for _, off := range order {
			m := stacks[off].m
			dg := make([]float64, m)
			for i := range m {
				dg[i] = rg[off][i] - q[off][i]*dB
			}
			dG[off] = dg
		}
		return dB, dG, schur, q, nil
	}
	ll := loglik(gam, beta)
	newGam := make([]float64, nMonths)
	for iter := 0; ; iter++ {
		deriv()
		dB, dG, _, _, err := solve()
		if err != nil {
			return nil, err
		}
		step := 1.0
		maxStep := math.Abs(dB)
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
			nl := loglik(newGam, beta+step*dB)
			if nl >= ll-1e-12*math.Abs(ll) || step < 1e-8 {
				ll = nl
				break
			}
			step /= 2
		}
		copy(gam, newGam)
		beta += step * dB
		fit.iter = iter + 1
		if maxStep*step < 1e-11 {
			break
		}
		if iter >= 100 || !finite(beta) {
			return nil, errors.New("stacked Poisson: no convergence in 100 Newton steps")
		}
	}
	// sandwich at the optimum: unit scores with the month effects partialled out
	deriv()
	_, _, schur, q, err := solve()
	if err != nil {
		return nil, err
	}
	sc := make([]float64, G)
	used := make([]bool, G)
	nObs := 0
	for _, b := range keep {
		blockProbs(b, gam, beta, d, free, pi)
		n := 0.0
		for i := range b.n {
			n += y[b.start+i]
		}
		wu := w[b.start]
		s := 0.0
		for i := range b.n {
			fi := free[b.tOff+i]
			if fi == -2 {
				continue
			}
			nObs++
			r := wu * (y[b.start+i] - n*pi[i])
			s += d[b.start+i] * r
			if fi >= 0 {
				s -= q[b.tOff][fi] * r
			}
		}
		c := cl[b.start]
		sc[c] += s
		used[c] = true
	}
	kParams := 1 + len(keep) + activeMonths - 1
	Gu := 0
	meat := 0.0
	for g, u := range used {
		if u {
			Gu++
			meat += sc[g] * sc[g]
		}
	}
	if Gu < 2 || nObs <= kParams {
		return nil, fmt.Errorf("stacked Poisson: %d clusters, %d observations for %d parameters", Gu, nObs, kParams)
	}
	fit.adj = float64(Gu) / float64(Gu-1) * float64(nObs-1) / float64(nObs-kParams)
	fit.beta = []float64{beta}
	fit.vcov = mat.NewSymDense(1, []float64{fit.adj * meat / (schur * schur)})
	fit.g = Gu
	fit.nObs = nObs
	a := make([]float64, G)
	for g := range a {
		a[g] = sc[g] / schur
	}
	fit.a = [][]float64{a}
	return fit, nil
}

// blockProbs writes the block's multinomial month probabilities into pi.
func blockProbs(b ppmlBlock, gam []float64, beta float64, d []float64, free []int, pi []float64) {
	mx := math.Inf(-1)
	for i := range b.n {
		if free[b.tOff+i] != -2 {
			mx = max(mx, gam[b.tOff+i]+beta*d[b.start+i])
		}
	}
	z := 0.0
	for i := range b.n {
		if free[b.tOff+i] == -2 {
			pi[i] = 0
			continue
		}
		pi[i] = math.Exp(gam[b.tOff+i] + beta*d[b.start+i] - mx)
		z += pi[i]
	}
	for i := range b.n {
		pi[i] /= z
	}
}
