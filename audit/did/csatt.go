package did

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/did/poisson"
	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/panel"
	"gonum.org/v1/gonum/mat"
)

// Group-time average treatment effects (Callaway & Sant'Anna 2021, J.
// Econometrics 225(2)) with the never-treated, matching-weighted units as the
// comparison group.
//
// ATT(g,t) compares the change of cohort g (units first treated in month g)
// from a base month b to month t with the controls' change over the same
// months. Base period "varying" as in CS's did package default: b = g−1 for
// t ≥ g and b = t−1 for t < g, so pre-period cells are one-month placebo
// changes. Without covariates the cell estimate is the difference of weighted
// mean changes; with covariates it is the doubly robust DiD of Sant'Anna &
// Zhao (2020, J. Econometrics 219(1)), panel version: a logistic propensity
// score of cohort membership and a linear regression of the controls' change,
// both on [1, covariates], with the influence function including both
// estimation effects.
//
// Aggregations (group shares treated as fixed, i.e. conditional on cohort
// sizes):
//   - overall ("simple"): post cells 0 ≤ t−g < Window.Post weighted by cohort size;
//   - by event time e = t−g: cohorts weighted by size;
//   - by cohort: the mean of the cohort's post cells.
//
// Relative effect = ATT / (treated post mean − ATT), its interval from the
// delta method on the joint influence function of ATT and the treated mean.
// Inference: cluster sums of unit influence contributions with factor
// G/(G−1); with few treated clusters (or when asked) a multiplier bootstrap
// with Rademacher or Webb weights by cluster, interval ATT ± 95% robust.Quantile of
// |ATT*−ATT| and standard error from the bootstrap interquartile range.

// csRun holds what every cell of one outcome shares.
type csRun struct {
	p        *panel.Panel
	y        []float64
	T        int
	controls []int     // unit indices of never-treated units with weight > 0
	cw       []float64 // their weights
	dr       bool      // doubly robust with covariates
	k        int       // 1 + covariates
	// controls' outcome-regression cross-product inverse (n-scaled later)
	xpxInvC *mat.SymDense
	ps      map[int]*psFit // per cohort
}

// psFit is a cohort's propensity score model.
type psFit struct {
	p     []float64     // fitted propensity per sample member (treated then controls)
	hinv  *mat.SymDense // (Σ w p(1−p) x x')⁻¹
	units []int         // treated units of the cohort
	tw    []float64     // treated weights
}

// csCell is one group-time estimate with unit influence contributions φ
// (estimate − truth ≈ Σ φ): phiT on the cohort's treated, phiC on controls.
type csCell struct {
	att        float64
	phiT, phiC []float64
}

func newCSRun(p *panel.Panel, y []float64) *csRun {
	r := &csRun{p: p, y: y, T: p.Months, ps: map[int]*psFit{}}
	for u, un := range p.Units {
		if un.FirstTreated == -1 && un.Weight > 0 {
			r.controls = append(r.controls, u)
			r.cw = append(r.cw, un.Weight)
		}
	}
	return r
}

// covariates returns [1, covariates...] for unit u.
func (r *csRun) covariates(u int) []float64 {
	return append([]float64{1}, r.p.Units[u].Covariates...)
}

// prepareDR fits the controls' outcome-regression design once and one
// propensity model per cohort. It returns an error when a model cannot be fit.
func (r *csRun) prepareDR(cohorts map[int][]int) error {
	r.k = 1 + len(r.p.Units[0].Covariates)
	xpx := mat.NewSymDense(r.k, nil)
	for i, u := range r.controls {
		robust.AddOuter(xpx, r.covariates(u), r.cw[i])
	}
	r.xpxInvC = mat.NewSymDense(r.k, nil)
	if err := poisson.InvSym(r.xpxInvC, xpx); err != nil {
		return fmt.Errorf("doubly robust: controls' covariates: %w", err)
	}
	for g, units := range cohorts {
		n := len(units) + len(r.controls)
		x := make([][]float64, 0, n)
		d := make([]float64, 0, n)
		w := make([]float64, 0, n)
		tw := make([]float64, len(units))
		for i, u := range units {
			x = append(x, r.covariates(u))
			d = append(d, 1)
			w = append(w, r.p.Units[u].Weight)
			tw[i] = r.p.Units[u].Weight
		}
		for i, u := range r.controls {
			x = append(x, r.covariates(u))
			d = append(d, 0)
			w = append(w, r.cw[i])
		}
		pr, hinv, err := robust.Logit(x, d, w)
		if err != nil {
			return fmt.Errorf("doubly robust: propensity score of cohort %s: %w", r.p.MonthTime(g).Format("2006-01"), err)
		}
		r.ps[g] = &psFit{p: pr, hinv: hinv, units: units, tw: tw}
	}
	r.dr = true
	return nil
}

// cell estimates ATT(g,t) with base month b for the treated units of cohort g.
func (r *csRun) cell(g int, units []int, t, b int) csCell {
	if r.dr {
		return r.cellDR(g, t, b)
	}
	T := r.T
	c := csCell{phiT: make([]float64, len(units)), phiC: make([]float64, len(r.controls))}
	mT, wT := 0.0, 0.0
	for _, u := range units {
		w := r.p.Units[u].Weight
		mT += w * (r.y[u*T+t] - r.y[u*T+b])
		wT += w
	}
	mT /= wT
	mC, wC := 0.0, 0.0
	for i, u := range r.controls {
		mC += r.cw[i] * (r.y[u*T+t] - r.y[u*T+b])
		wC += r.cw[i]
	}
	mC /= wC
	for i, u := range units {
		c.phiT[i] = r.p.Units[u].Weight * (r.y[u*T+t] - r.y[u*T+b] - mT) / wT
	}
	for i, u := range r.controls {
		c.phiC[i] = -r.cw[i] * (r.y[u*T+t] - r.y[u*T+b] - mC) / wC
	}
	c.att = mT - mC
	return c
}

// cellDR is the doubly robust cell (Sant'Anna & Zhao 2020, drdid panel
// estimator and its influence function).
func (r *csRun) cellDR(g, t, b int) csCell {
	ps := r.ps[g]
	T, k := r.T, r.k
	nt, nc := len(ps.units), len(r.controls)
	n := float64(nt + nc)
	unit := func(i int) (u int, w, d float64) {
		if i < nt {
			return ps.units[i], ps.tw[i], 1
		}
		return r.controls[i-nt], r.cw[i-nt], 0
	}
	// outcome regression of the controls' change on [1, X]
	xty := make([]float64, k)
	for i, u := range r.controls {
		dy := r.y[u*T+t] - r.y[u*T+b]
		for a, xa := range r.covariates(u) {
			xty[a] += r.cw[i] * xa * dy
		}
	}
	beta := make([]float64, k)
	mat.NewVecDense(k, beta).MulVec(r.xpxInvC, mat.NewVecDense(k, xty))
	dy := make([]float64, nt+nc)
	out := make([]float64, nt+nc)
	wTr := make([]float64, nt+nc)
	wCo := make([]float64, nt+nc)
	xs := make([][]float64, nt+nc)
	sT, sC, swT, swC := 0.0, 0.0, 0.0, 0.0
	for i := range dy {
		u, w, d := unit(i)
		xs[i] = r.covariates(u)
		dy[i] = r.y[u*T+t] - r.y[u*T+b]
		for a := range k {
			out[i] += xs[i][a] * beta[a]
		}
		pi := min(ps.p[i], 1-1e-16)
		wTr[i] = w * d
		wCo[i] = w * pi * (1 - d) / (1 - pi)
		sT += wTr[i] * (dy[i] - out[i])
		sC += wCo[i] * (dy[i] - out[i])
		swT += wTr[i]
		swC += wCo[i]
	}
	etaT, etaC := sT/swT, sC/swC
	M1 := make([]float64, k)
	M2 := make([]float64, k)
	M3 := make([]float64, k)
	for i := range dy {
		for a := range k {
			M1[a] += wTr[i] * xs[i][a] / n
			M2[a] += wCo[i] * (dy[i] - out[i] - etaC) * xs[i][a] / n
			M3[a] += wCo[i] * xs[i][a] / n
		}
	}
	// linear representations: ols_i = w(1−D)(ΔY−out)x'·(XpX/n)⁻¹, ps_i = w(D−p)x'·(H/n)⁻¹
	a1 := make([]float64, k) // (XpX/n)⁻¹ M1
	a3 := make([]float64, k) // (XpX/n)⁻¹ M3
	a2 := make([]float64, k) // (H/n)⁻¹ M2
	mat.NewVecDense(k, a1).MulVec(r.xpxInvC, mat.NewVecDense(k, M1))
	mat.NewVecDense(k, a3).MulVec(r.xpxInvC, mat.NewVecDense(k, M3))
	mat.NewVecDense(k, a2).MulVec(ps.hinv, mat.NewVecDense(k, M2))
	mwT, mwC := swT/n, swC/n
	c := csCell{att: etaT - etaC, phiT: make([]float64, nt), phiC: make([]float64, nc)}
	for i := range dy {
		_, w, d := unit(i)
		xa1, xa2, xa3 := 0.0, 0.0, 0.0
		for a := range k {
			xa1 += xs[i][a] * a1[a]
			xa2 += xs[i][a] * a2[a]
			xa3 += xs[i][a] * a3[a]
		}
		ols := w * (1 - d) * (dy[i] - out[i]) * n // times x'(XpX)⁻¹ gives x'(XpX/n)⁻¹ scaling
		psS := w * (d - ps.p[i]) * n
		infT := (wTr[i]*(dy[i]-out[i]) - wTr[i]*etaT - ols*xa1) / mwT
		infC := (wCo[i]*(dy[i]-out[i]) - wCo[i]*etaC + psS*xa2 - ols*xa3) / mwC
		phi := (infT - infC) / n
		if i < nt {
			c.phiT[i] = phi
		} else {
			c.phiC[i-nt] = phi
		}
	}
	return c
}

// csResult is the outcome of one CS run.
type csResult struct {
	overall  *estimate
	events   []eventPoint
	preP     float64
	hasPreP  bool
	byCohort map[int]float64
}

// aggregator accumulates an aggregate estimate and its unit contributions.
type aggregator struct {
	est float64
	phi []float64 // by unit index
}

func (a *aggregator) add(wt float64, c csCell, units, controls []int) {
	a.est += wt * c.att
	for i, u := range units {
		a.phi[u] += wt * c.phiT[i]
	}
	for i, u := range controls {
		a.phi[u] += wt * c.phiC[i]
	}
}

// callawaySantAnna runs the group-time estimator on outcome y.
func callawaySantAnna(p *panel.Panel, y []float64, cl []int, G int, opts Options, rng *rand.Rand, dr bool) (*csResult, error) {
	r := newCSRun(p, y)
	cohorts := map[int][]int{}
	tClusters := map[int]bool{}
	for u, un := range p.Units {
		if un.FirstTreated >= 1 && un.Weight > 0 {
			cohorts[un.FirstTreated] = append(cohorts[un.FirstTreated], u)
			tClusters[cl[u]] = true
		}
	}
	nTreated := 0
	for _, us := range cohorts {
		nTreated += len(us)
	}
	if nTreated < 2 || len(r.controls) < 2 {
		return nil, fmt.Errorf("%d treated units with a pre-period and %d never-treated controls; need at least 2 of each", nTreated, len(r.controls))
	}
	method := "unconditional"
	if dr {
		if err := r.prepareDR(cohorts); err != nil {
			return nil, err
		}
		method = "doubly robust (Sant'Anna & Zhao 2020)"
	}
	T, N := p.Months, len(p.Units)
	win := opts.Window
	// denominators: cohort sizes over available cells
	var overallW float64
	evW := map[int]float64{}
	for g, us := range cohorts {
		ng := float64(len(us))
		for e := -win.Pre; e < win.Post; e++ {
			t := g + e
			if t < 1 || t >= T || (e < 0 && t-1 < 0) {
				continue
			}
			evW[e] += ng
			if e >= 0 {
				overallW += ng
			}
		}
	}
	if overallW == 0 {
		return nil, errors.New("no post-treatment month inside the panel")
	}
	newAgg := func() *aggregator { return &aggregator{phi: make([]float64, N)} }
	overall, treatedMean := newAgg(), newAgg()
	ev := map[int]*aggregator{}
	for e := range evW {
		ev[e] = newAgg()
	}
	byCohort := map[int]float64{}
	cohortAgg := map[int]*aggregator{}
	for g, us := range cohorts {
		ng := float64(len(us))
		nPost := 0
		sumPost := 0.0
		nPostG := float64(min(win.Post, T-g))
		if nPostG > 0 {
			cohortAgg[g] = newAgg()
		}
		for e := -win.Pre; e < win.Post; e++ {
			t := g + e
			if t < 1 || t >= T {
				continue
			}
			b := g - 1
			if e < 0 {
				b = t - 1
			}
			c := r.cell(g, us, t, b)
			ev[e].add(ng/evW[e], c, us, r.controls)
			if e >= 0 {
				overall.add(ng/overallW, c, us, r.controls)
				cohortAgg[g].add(1/nPostG, c, us, r.controls)
				nPost++
				sumPost += c.att
				// treated observed mean in month t and its contributions
				m, wsum := 0.0, 0.0
				for _, u := range us {
					m += p.Units[u].Weight * y[u*T+t]
					wsum += p.Units[u].Weight
				}
				m /= wsum
				treatedMean.est += ng / overallW * m
				for _, u := range us {
					treatedMean.phi[u] += ng / overallW * p.Units[u].Weight * (y[u*T+t] - m) / wsum
				}
			}
		}
		if nPost > 0 {
			byCohort[g] = sumPost / float64(nPost)
		}
	}
	// Small-sample factors by arm (see csVarianceFactors): no overall
	// G/(G−1), which would leave the treated arm's variance shrunk.
	fT, fC, H, ok := csVarianceFactors(p, cl, G, len(cohorts))
	scale := func(s []float64) []float64 {
		for g := range s {
			if tClusters[g] {
				s[g] *= fT
			} else {
				s[g] *= fC
			}
		}
		return s
	}
	sO := scale(robust.ClusterSums(overall.phi, cl, G))
	// relative effect by the delta method: rel = θ/(M−θ)
	theta, M := overall.est, treatedMean.est
	relPhi := make([]float64, N)
	cf := M - theta
	for u := range relPhi {
		relPhi[u] = (M*overall.phi[u] - theta*treatedMean.phi[u]) / (cf * cf)
	}
	sR := scale(robust.ClusterSums(relPhi, cl, G))
	boot := opts.Inference == InferenceBootstrap
	var bd *robust.BootDraws
	if boot {
		bd = robust.NewBootDraws(rng, opts.Draws, G)
	}
	res := &csResult{byCohort: byCohort}
	e := &estimate{att: theta, treatedUnits: nTreated, controlUnits: len(r.controls)}
	ifInfer := func(est float64, s []float64) (se, lo, hi, pv float64) {
		return robust.InferSums(est, s, bd, H)
	}
	e.se, e.lo, e.hi, e.p = ifInfer(theta, sO)
	if cf > 0 {
		_, rlo, rhi, _ := ifInfer(theta/cf, sR)
		e.hasRel, e.rel, e.relLo, e.relHi = true, theta/cf, rlo, rhi
	}
	name, _ := robust.BootName(G)
	if boot {
		e.method = fmt.Sprintf("multiplier-bootstrap-%s-%d", name, opts.Draws)
	} else {
		e.method = fmt.Sprintf("influence-function-t(%d)", H-1)
	}
	if !ok {
		e.noInterval, e.lo, e.hi, e.relLo, e.relHi = true, theta, theta, e.rel, e.rel
		e.method += "-no-interval"
		e.note += "every cohort has one treated cluster, so the treated areas' variance cannot be estimated; "
	} else if H < infer.MinTreatedForInterval {
		e.noInterval, e.lo, e.hi, e.relLo, e.relHi = true, theta, theta, e.rel, e.rel
		e.note += fmt.Sprintf("%d treated clusters are too few for a reliable interval; p is rough; ", H)
	}
	e.note += fmt.Sprintf("%s group-time ATT, never-treated controls, varying base period, %d cohort(s), cohort-size weights over event months 0..%d",
		method, len(cohorts), win.Post-1)
	res.overall = e
	gs := make([]int, 0, len(cohortAgg))
	for g := range cohortAgg {
		gs = append(gs, g)
	}
	slices.Sort(gs)
	for _, g := range gs {
		a := cohortAgg[g]
		se, lo, hi, _ := ifInfer(a.est, scale(robust.ClusterSums(a.phi, cl, G)))
		e.cohorts = append(e.cohorts, cohortPoint{g: g, units: len(cohorts[g]), est: a.est, se: se, lo: lo, hi: hi})
	}
	// event study and pre-trend test
	var preEst []float64
	var preSums [][]float64
	for ei := -win.Pre; ei < win.Post; ei++ {
		a, ok := ev[ei]
		if !ok {
			continue
		}
		s := scale(robust.ClusterSums(a.phi, cl, G))
		se, lo, hi, _ := ifInfer(a.est, s)
		res.events = append(res.events, eventPoint{e: ei, est: a.est, se: se, lo: lo, hi: hi})
		if ei < 0 {
			preEst = append(preEst, a.est)
			preSums = append(preSums, s)
		}
	}
	if len(preEst) > 0 {
		k := len(preEst)
		v := mat.NewSymDense(k, nil)
		for a := range k {
			for b := a; b < k; b++ {
				sum := 0.0
				for g := range G {
					sum += preSums[a][g] * preSums[b][g]
				}
				v.SetSym(a, b, sum)
			}
		}
		if pv, ok := robust.LeadTest(preEst, v, H); ok && H >= infer.MinTreatedForInterval {
			res.preP, res.hasPreP = pv, true
		}
	}
	return res, nil
}

// csVarianceFactors returns the factors that scale the cluster influence
// sums of treated clusters (fT) and untreated clusters (fC), H the smaller of
// the two cluster counts, and ok false when the treated arm's variance
// cannot be estimated. The treated units' influence is taken around their
// cohort's mean, so the treated sums lose one degree of freedom per cohort:
// their sum of squares estimates (H_T − C)/H_T of the variance (H_T treated
// clusters, C cohorts), and fT = √(H_T/(H_T − C)); the controls' around one
// mean, fC = √(H_C/(H_C − 1)). This is the HC1 correction applied to each
// arm of a difference of means, as in the two-sample variance of a
// difference (Imbens & Kolesár 2016 discuss why the arm with few clusters
// drives the reference distribution, whence t(H − 1)). With C ≥ H_T
// (every cohort one treated cluster) no within-cohort variance exists.
func csVarianceFactors(p *panel.Panel, cl []int, G, cohorts int) (fT, fC float64, H int, ok bool) {
	tcl := make([]bool, G)
	for u, un := range p.Units {
		if un.FirstTreated >= 1 && un.Weight > 0 {
			tcl[cl[u]] = true
		}
	}
	ccl := map[int]bool{}
	for u, un := range p.Units {
		if un.FirstTreated == -1 && un.Weight > 0 && !tcl[cl[u]] {
			ccl[cl[u]] = true
		}
	}
	hT, hC := 0, len(ccl)
	for _, t := range tcl {
		if t {
			hT++
		}
	}
	H = min(hT, hC)
	fC = 1
	if hC > 1 {
		fC = math.Sqrt(float64(hC) / float64(hC-1))
	}
	if hT <= cohorts {
		return 1, fC, H, false
	}
	return math.Sqrt(float64(hT) / float64(hT-cohorts)), fC, H, true
}

// placebo is a cs-att estimate with start dates moved back.
type placebo struct {
	att, lo, hi, p float64
	ok             bool
}

func (pl *placebo) row(layer string, shift int) []PlaceboRow {
	if !pl.ok || !robust.Finite(pl.att) || !robust.Finite(pl.lo) || !robust.Finite(pl.hi) || !robust.Finite(pl.p) {
		return nil
	}
	return []PlaceboRow{{Layer: layer, Estimator: EstimatorCS, ShiftMonths: shift, ATT: pl.att, CI95: [2]float64{pl.lo, pl.hi}, PValue: pl.p}}
}

// placeboCS moves every cohort's start g back to g' = g − shift and estimates
// the unconditional ATT(g', t) for g' ≤ t < g (base month g'−1) from months
// before the real start only, aggregated by cohort size like the overall ATT.
func placeboCS(p *panel.Panel, y []float64, cl []int, G int, opts Options, rng *rand.Rand) (*placebo, error) {
	s := opts.PlaceboShift
	r := newCSRun(p, y)
	cohorts := map[int][]int{}
	tClusters := map[int]bool{}
	for u, un := range p.Units {
		if un.FirstTreated-s >= 1 && un.Weight > 0 {
			cohorts[un.FirstTreated] = append(cohorts[un.FirstTreated], u)
			tClusters[cl[u]] = true
		}
	}
	if len(r.controls) < 2 || len(cohorts) == 0 {
		return nil, fmt.Errorf("no cohort has %d months before its start plus a base month", s+1)
	}
	total := 0.0
	for _, us := range cohorts {
		total += float64(len(us) * min(s, opts.Window.Post))
	}
	agg := &aggregator{phi: make([]float64, len(p.Units))}
	for g, us := range cohorts {
		gf := g - s
		for t := gf; t < g && t-gf < opts.Window.Post; t++ {
			agg.add(float64(len(us))/total, r.cell(gf, us, t, gf-1), us, r.controls)
		}
	}
	sums := robust.ClusterSums(agg.phi, cl, G)
	fT, fC, H, ok := csVarianceFactors(p, cl, G, len(cohorts))
	if !ok {
		return nil, errors.New("every cohort has one treated cluster: no placebo interval")
	}
	for g := range sums {
		if tClusters[g] {
			sums[g] *= fT
		} else {
			sums[g] *= fC
		}
	}
	var bd *robust.BootDraws
	if opts.Inference == InferenceBootstrap {
		bd = robust.NewBootDraws(rng, opts.Draws, G)
	}
	_, lo, hi, pv := robust.InferSums(agg.est, sums, bd, H)
	return &placebo{att: agg.est, lo: lo, hi: hi, p: pv, ok: true}, nil
}
