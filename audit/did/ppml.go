package did

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"

	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/panel"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
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
	kParams  int           // parameters, fixed effects included
	scores   *mat.Dense    // used clusters × K: score sums with the fixed effects partialled out
	hess     *mat.SymDense // K×K: minus the Hessian of β with the fixed effects partialled out
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
	ev                        []int // event time t − g of treated rows; noEvent for controls
	n1, n2                    int
	blocks                    []ppmlBlock
	tUnits, cUnits, tClusters map[int]bool
	postSum, postN            float64
	cohorts                   []int
}

// noEvent marks a control row of a stacked design.
const noEvent = math.MinInt

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
	ev := make([]int, 0, rows)
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
				if tr {
					ev = append(ev, t-start)
				} else {
					ev = append(ev, noEvent)
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
	return &stacked{y: yy, d: d, w: w, f1: f1, f2: f2, cl: cc, ev: ev, n1: n1, n2: n2, blocks: blocks,
		tUnits: tUnits, cUnits: cUnits, tClusters: tClusters, postSum: postSum, postN: postN, cohorts: cohorts}
}

// stackedPPML estimates the effect on outcome y with a Poisson regression
// stacked by cohort: for each cohort g the cohort's units and the
// never-treated controls in months [g−Pre, g+Post), with stack-specific unit
// and month fixed effects and one treated×post regressor (a "clean controls"
// stacked design, as in Cengiz, Dube, Lindner & Zipperer 2019). The same
// design with one regressor per event month gives the event study
// (ppmlEventStudy) and the joint test of its leads.
//
// Inference is chosen by H, the smaller of the treated and untreated cluster
// counts (MacKinnon & Webb 2017): below infer.MinTreatedForInterval no
// interval is given and the p-value is the randomization test's
// (poissonRandomization); otherwise poissonInterval.
func stackedPPML(ctx context.Context, p *panel.Panel, y []float64, cl []int, G int, opts Options, rng *rand.Rand) (*estimate, error) {
	st := stackPanel(p, y, cl, opts.Window, 0)
	tUnits, cUnits, tClusters, cohorts := st.tUnits, st.cUnits, st.tClusters, st.cohorts
	postSum, postN := st.postSum, st.postN
	if len(tUnits) < 2 || len(cUnits) < 2 {
		return nil, fmt.Errorf("%d treated and %d control units in the stacked windows; need at least 2 of each", len(tUnits), len(cUnits))
	}
	if err := separated(st); err != nil {
		return nil, err
	}
	fit, err := fitStackedPoisson(st.y, [][]float64{st.d}, st.w, st.cl, G, st.blocks, st.n2)
	if err != nil {
		return nil, err
	}
	b := fit.beta[0]
	se := math.Sqrt(fit.vcov.At(0, 0))
	if !(se > 0) {
		return nil, errSingular
	}
	H := min(len(tClusters), fit.g-len(tClusters))
	e := &estimate{treatedUnits: len(tUnits), controlUnits: len(cUnits), se: se}
	var lo, hi float64
	if H < infer.MinTreatedForInterval {
		res, err := poissonRandomization(ctx, p, y, cl, G, opts, rng)
		if err != nil {
			return nil, fmt.Errorf("randomization test: %w", err)
		}
		lo, hi, e.p, e.noInterval = b, b, res.P, true
		kind := "monte-carlo"
		if res.Exact {
			kind = "exact"
		}
		e.method = fmt.Sprintf("randomization-%s-%d", kind, res.Evaluated)
	} else if opts.PoissonInference == PoissonCR1T || opts.Inference == InferenceAnalytic {
		lo, hi, e.p, e.method = poissonInterval(b, se, H)
	} else {
		r, err := poissonScoreTest(ctx, st, G, b, len(tClusters), opts, rng)
		if err != nil {
			return nil, fmt.Errorf("score bootstrap: %w", err)
		}
		lo, hi, e.p = r.Lo, r.Hi, r.P
		e.method = fmt.Sprintf("score-bootstrap-null-imposed-%s-%d", r.Weights, r.Draws)
		if math.IsInf(lo, 0) || math.IsInf(hi, 0) {
			lo, hi, e.noInterval = b, b, true
			e.note += "the score bootstrap's interval is unbounded (too few treated clusters to bound it); "
		}
	}
	M := postSum / postN
	e.att = M * (1 - math.Exp(-b))
	e.lo, e.hi = M*(1-math.Exp(-lo)), M*(1-math.Exp(-hi))
	e.hasRel, e.rel, e.relLo, e.relHi = true, math.Expm1(b), math.Expm1(lo), math.Expm1(hi)
	e.note = fmt.Sprintf("Poisson PML stacked by cohort (%d stacks, window %d months before, %d after), stack-specific unit and month fixed effects; b = %.4g log points, se of b = %.4g; att = treated post mean x (1 - exp(-b)); %d treated and %d untreated clusters",
		len(cohorts), opts.Window.Pre, opts.Window.Post, b, se, len(tClusters), fit.g-len(tClusters))
	if e.noInterval {
		e.note += fmt.Sprintf("; with fewer than %d treated clusters no interval is reliable: p is the randomization test re-dealing the import's start months over the eligible units", infer.MinTreatedForInterval)
	}
	if fit.dropped1 > 0 {
		e.note += fmt.Sprintf("; %d stacked unit(s) with all-zero outcome dropped (no information under unit fixed effects)", fit.dropped1)
	}
	es, err := ppmlEventStudy(st, G, opts.Window, H)
	if err != nil {
		e.note += fmt.Sprintf("; no event study: %v", err)
		return e, nil
	}
	e.events, e.preP, e.hasPre = es.events, es.preP, es.hasPre
	if es.note != "" {
		e.note += "; " + es.note
	}
	return e, nil
}

// poissonInterval is the headline's interval and p-value with H ≥
// infer.MinTreatedForInterval: the CR1 t statistic of b against Student's t
// with H − 1 degrees of freedom, H the smaller of the treated and untreated
// cluster counts. The variance of a treatment coefficient is driven by the
// treated clusters' scores, so its t ratio has about H − 1 degrees of freedom
// rather than G − 1 (Donald & Lang 2007; Imbens & Kolesár 2016 on few
// treated clusters); interval and p-value come from the same statistic, so
// the interval excludes 0 exactly when p < 0.05. This is the seam for the
// score bootstrap with the null imposed (Kline & Santos 2012) when infer
// provides it.
func poissonInterval(b, se float64, H int) (lo, hi, p float64, method string) {
	t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(H - 1)}
	c := t.Quantile(0.975)
	return b - c*se, b + c*se, 2 * t.Survival(math.Abs(b/se)), fmt.Sprintf("cr1-t(%d)", H-1)
}

// poissonScoreTest is the headline's test of b = 0 and its 95% interval by
// the score bootstrap with the null imposed (Kline & Santos 2012;
// infer.ScoreBootstrap): each candidate value is imposed by refitting the
// stacked model with b held there (fitStackedPoissonAt), and the cluster
// scores with the fixed effects partialled out are perturbed with the weights
// infer.ChooseWeights picks by treated clusters. The interval inverts the
// same test, so it excludes 0 exactly when p < 0.05.
func poissonScoreTest(ctx context.Context, st *stacked, G int, b float64, treatedClusters int, opts Options, rng *rand.Rand) (*infer.ScoreResult, error) {
	fitter := func(ctx context.Context, a []float64, b0 float64) (infer.ScoreFit, error) {
		f, err := fitStackedPoissonAt(st.y, [][]float64{st.d}, st.w, st.cl, G, st.blocks, st.n2, []float64{b0 / a[0]})
		if err != nil {
			return infer.ScoreFit{}, err
		}
		return infer.ScoreFit{Scores: f.scores, Hessian: f.hess, NObs: f.nObs, NParams: f.kParams}, nil
	}
	so := infer.DefaultScoreOptions()
	so.Draws, so.Seed, so.Tol = opts.Draws, rng.Uint64(), 1e-4
	used := map[int]bool{}
	for _, c := range st.cl {
		used[c] = true
	}
	so.Weights = infer.ScoreRademacher
	if infer.ChooseWeights(treatedClusters, len(used)) == infer.Webb {
		so.Weights = infer.ScoreWebb
	}
	return infer.ScoreBootstrap(ctx, fitter, []float64{1}, b, 0, so)
}

// separated diagnoses a separated Poisson layer: when the treated units'
// counts are all zero after (or all zero before) their import, the
// treatment coefficient is −∞ (or +∞) and no finite estimate exists.
func separated(st *stacked) error {
	pre, post := 0.0, 0.0
	for i, ev := range st.ev {
		switch {
		case ev == noEvent:
		case ev >= 0:
			post += st.y[i] * st.w[i]
		default:
			pre += st.y[i] * st.w[i]
		}
	}
	switch {
	case post == 0:
		return fmt.Errorf("%w: every import area has zero counts after the import, so the Poisson ratio is 0 (log ratio −∞) and has no interval", ErrSeparated)
	case pre == 0:
		return fmt.Errorf("%w: every import area has zero counts before the import, so the Poisson ratio is unbounded", ErrSeparated)
	}
	return nil
}

// poissonRandomization is the randomization test of the headline: the
// stacked Poisson log ratio b recomputed with the import's start months
// re-dealt over the eligible units (the treated units with a pre-period and
// the controls with positive weight; infer.Randomization), at most
// 2000 reassignments enumerated, otherwise opts.Draws drawn.
func poissonRandomization(ctx context.Context, p *panel.Panel, y []float64, cl []int, G int, opts Options, rng *rand.Rand) (*infer.RandomizationResult, error) {
	var pool []int
	var obs infer.Assignment
	for u, un := range p.Units {
		switch {
		case un.Weight <= 0:
		case un.FirstTreated >= 1:
			pool = append(pool, u)
			obs.Units = append(obs.Units, u)
			obs.Starts = append(obs.Starts, un.FirstTreated)
		case un.FirstTreated < 0:
			pool = append(pool, u)
		}
	}
	q := &panel.Panel{Start: p.Start, Months: p.Months, Outcomes: p.Outcomes, Y: p.Y, Units: slices.Clone(p.Units)}
	stat := func(a infer.Assignment) (float64, error) {
		for _, u := range pool {
			q.Units[u].FirstTreated = -1
		}
		for i, u := range a.Units {
			q.Units[u].FirstTreated = a.Starts[i]
		}
		st := stackPanel(q, y, cl, opts.Window, 0)
		if err := separated(st); err != nil {
			return 0, err
		}
		fit, err := fitStackedPoisson(st.y, [][]float64{st.d}, st.w, st.cl, G, st.blocks, st.n2)
		if err != nil {
			return 0, err
		}
		return fit.beta[0], nil
	}
	return infer.Randomization(ctx, stat, pool, obs, infer.RandomizationOptions{MaxExact: 2000, Draws: opts.Draws, Rand: rng})
}

// ppmlStudy is the Poisson event study of one outcome.
type ppmlStudy struct {
	events []eventPoint
	preP   float64
	hasPre bool
	note   string
}

// ppmlEventStudy fits the stacked Poisson model with one treated×event-month
// regressor per event month e in −Pre..Post−1 except the reference −1, and
// returns each month's relative effect exp(b_e) − 1 with its 95% band (CR1, t
// with H − 1 degrees of freedom; no band when H < infer.MinTreatedForInterval)
// and the joint test that the leads (e < −1) are zero (leadTest with H
// clusters). An event month whose treated counts are all zero has no finite
// estimate; it is left out and named in the note.
func ppmlEventStudy(st *stacked, G int, win Window, H int) (*ppmlStudy, error) {
	sum := map[int]float64{}
	for i, ev := range st.ev {
		if ev != noEvent {
			sum[ev] += st.y[i] * st.w[i]
		}
	}
	var cols, empty []int
	for e := -win.Pre; e < win.Post; e++ {
		v, ok := sum[e]
		switch {
		case e == -1 || !ok:
		case v == 0:
			empty = append(empty, e)
		default:
			cols = append(cols, e)
		}
	}
	if len(cols) == 0 {
		return nil, errors.New("no event month with treated counts")
	}
	x := make([][]float64, len(cols))
	for j, e := range cols {
		x[j] = make([]float64, len(st.y))
		for i, ev := range st.ev {
			if ev == e {
				x[j][i] = 1
			}
		}
	}
	fit, err := fitStackedPoisson(st.y, x, st.w, st.cl, G, st.blocks, st.n2)
	if err != nil {
		return nil, err
	}
	out := &ppmlStudy{}
	band := H >= infer.MinTreatedForInterval
	c := 0.0
	if band {
		c = distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(H - 1)}.Quantile(0.975)
	}
	var leads []int
	for j, e := range cols {
		if e == 0 {
			out.events = append(out.events, eventPoint{e: -1, reference: true})
		}
		b, se := fit.beta[j], math.Sqrt(fit.vcov.At(j, j))
		out.events = append(out.events, eventPoint{e: e, est: math.Expm1(b), se: se, lo: math.Expm1(b - c*se), hi: math.Expm1(b + c*se)})
		if e < -1 {
			leads = append(leads, j)
		}
	}
	if !slices.ContainsFunc(out.events, func(p eventPoint) bool { return p.reference }) {
		out.events = append(out.events, eventPoint{e: -1, reference: true})
		slices.SortFunc(out.events, func(a, b eventPoint) int { return a.e - b.e })
	}
	if len(empty) > 0 {
		out.note = fmt.Sprintf("event months %v left out of the event study: the import areas had no counts there", empty)
	}
	if !band {
		out.note = strings.TrimPrefix(out.note+fmt.Sprintf("; event-study points without bands and no pre-trend test: %d treated clusters are too few for a reliable interval", H), "; ")
		return out, nil
	}
	if len(leads) > 0 {
		bl := make([]float64, len(leads))
		vl := mat.NewSymDense(len(leads), nil)
		for a, j := range leads {
			bl[a] = fit.beta[j]
			for b2, k := range leads {
				if b2 >= a {
					vl.SetSym(a, b2, fit.vcov.At(j, k))
				}
			}
		}
		if p, ok := leadTest(bl, vl, H); ok {
			out.preP, out.hasPre = p, true
			out.note = strings.TrimPrefix(out.note+fmt.Sprintf("; pre_trend_p: joint test of the %d leads of this event study (F with %d clusters)", len(leads), H), "; ")
		}
	}
	return out, nil
}

// ppmlBlock is one stacked unit: rows [start, start+n) of the stacked
// arrays, months with fixed effects tOff..tOff+n−1 of its stack.
type ppmlBlock struct{ start, n, tOff int }

// fitStackedPoisson fits the Poisson model with one fixed effect per block
// (stacked unit), one per stack month and the regressors x[j] (each as long
// as y), by Newton's method on the likelihood with the unit effects
// concentrated out: given the rest, a unit's effect is
// log(Σ_t y / Σ_t exp(γ_t + x'β)), which turns each unit's counts into a
// multinomial over its months (Hausman, Hall & Griliches 1984). The month
// effects of a stack only meet that stack's units, so the Hessian is block
// diagonal plus a border for β and each Newton step costs one pass over the
// data. The estimate, scores and CR1 variance are those of the full
// dummy-variable fit (fitPoissonFE; checked in tests).
func fitStackedPoisson(y []float64, x [][]float64, w []float64, cl []int, G int, blocks []ppmlBlock, nMonths int) (*ppmlFit, error) {
	return fitStackedPoissonAt(y, x, w, cl, G, blocks, nMonths, nil)
}

// fitStackedPoissonAt is fitStackedPoisson with β held at fixed when fixed
// is not nil (the restricted fit of a score test: only the fixed effects
// move). Its scores and Hessian are then those at the restricted estimate.
func fitStackedPoissonAt(y []float64, x [][]float64, w []float64, cl []int, G int, blocks []ppmlBlock, nMonths int, fixed []float64) (*ppmlFit, error) {
	K := len(x)
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
	beta := make([]float64, K)
	copy(beta, fixed)
	maxN := 0
	for _, b := range keep {
		maxN = max(maxN, b.n)
	}
	pi := make([]float64, maxN)
	xbar := make([]float64, K)
	// loglik returns the concentrated log likelihood at (gam, beta).
	loglik := func(gam, beta []float64) float64 {
		ll := 0.0
		for _, b := range keep {
			blockProbs(b, gam, beta, x, free, pi)
			for i := range b.n {
				if yv := y[b.start+i]; yv > 0 {
					ll += w[b.start] * yv * math.Log(pi[i])
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
			for i := range b.n {
				n += y[b.start+i]
			}
			wu := w[b.start]
			clear(xbar)
			for j := range K {
				for i := range b.n {
					xbar[j] += pi[i] * x[j][b.start+i]
				}
			}
			a := A[b.tOff].RawSymmetric()
			gg, bb := gG[b.tOff], B[b.tOff]
			for i := range b.n {
				fi := free[b.tOff+i]
				r := y[b.start+i] - n*pi[i]
				for j := range K {
					gB[j] += wu * x[j][b.start+i] * r
				}
				if fi < 0 {
					continue
				}
				gg[fi] += wu * r
				for j := range K {
					bb[fi*K+j] += wu * n * pi[i] * (x[j][b.start+i] - xbar[j])
				}
				row := a.Data[fi*a.Stride:]
				row[fi] += wu * n * pi[i]
				for j := i; j < b.n; j++ {
					if fj := free[b.tOff+j]; fj >= 0 {
						row[fj] -= wu * n * pi[i] * pi[j]
					}
				}
			}
			c := C.RawSymmetric()
			for j := range K {
				for k := j; k < K; k++ {
					s := 0.0
					for i := range b.n {
						s += pi[i] * x[j][b.start+i] * x[k][b.start+i]
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
				return nil, nil, nil, nil, fmt.Errorf("stacked Poisson: month effects of a stack: %w", errSingular)
			}
			qm := mat.NewDense(m, K, nil)
			if err := ch.SolveTo(qm, mat.NewDense(m, K, B[off])); err != nil {
				return nil, nil, nil, nil, errSingular
			}
			rv := mat.NewVecDense(m, nil)
			if err := ch.SolveVecTo(rv, mat.NewVecDense(m, gG[off])); err != nil {
				return nil, nil, nil, nil, errSingular
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
			return nil, nil, nil, nil, fmt.Errorf("stacked Poisson: %w (treatment indistinguishable from the fixed effects)", errSingular)
		}
		for j := range K {
			if !(schur.At(j, j) > 1e-12*max(C.At(j, j), 1e-300)) {
				return nil, nil, nil, nil, fmt.Errorf("stacked Poisson: %w (treatment indistinguishable from the fixed effects)", errSingular)
			}
		}
		dv := mat.NewVecDense(K, nil)
		if err := ch.SolveVecTo(dv, mat.NewVecDense(K, num)); err != nil {
			return nil, nil, nil, nil, errSingular
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
		fit.iter = iter + 1
		if maxStep*step < 1e-11 {
			break
		}
		if iter >= 100 || slices.ContainsFunc(beta, func(v float64) bool { return !finite(v) }) {
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
		for i := range b.n {
			n += y[b.start+i]
		}
		wu := w[b.start]
		clear(s)
		for i := range b.n {
			fi := free[b.tOff+i]
			if fi == -2 {
				continue
			}
			nObs++
			r := wu * (y[b.start+i] - n*pi[i])
			for j := range K {
				s[j] += x[j][b.start+i] * r
				if fi >= 0 {
					s[j] -= q[b.tOff][fi*K+j] * r
				}
			}
		}
		c := cl[b.start]
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
	if err := invSym(&sInv, schur); err != nil {
		return nil, fmt.Errorf("stacked Poisson: %w", err)
	}
	fit.adj = float64(Gu) / float64(Gu-1) * float64(nObs-1) / float64(nObs-kParams)
	fit.beta = beta
	fit.kParams = kParams
	fit.hess = schur
	fit.scores = mat.NewDense(Gu, K, nil)
	for g, row := 0, 0; g < G; g++ {
		if used[g] {
			fit.scores.SetRow(row, sc[g*K:(g+1)*K])
			row++
		}
	}
	fit.g = Gu
	fit.nObs = nObs
	fit.a = make([][]float64, K)
	for j := range K {
		fit.a[j] = make([]float64, G)
	}
	meat := mat.NewSymDense(K, nil)
	for g, u := range used {
		if !u {
			continue
		}
		addOuter(meat, sc[g*K:(g+1)*K], 1)
		for j := range K {
			v := 0.0
			for k := range K {
				v += sInv.At(j, k) * sc[g*K+k]
			}
			fit.a[j][g] = v
		}
	}
	var tmp, v mat.Dense
	tmp.Mul(&sInv, meat)
	v.Mul(&tmp, &sInv)
	fit.vcov = mat.NewSymDense(K, nil)
	for j := range K {
		for k := j; k < K; k++ {
			fit.vcov.SetSym(j, k, fit.adj*(v.At(j, k)+v.At(k, j))/2)
		}
	}
	return fit, nil
}

// blockProbs writes the block's multinomial month probabilities into pi.
func blockProbs(b ppmlBlock, gam, beta []float64, x [][]float64, free []int, pi []float64) {
	mx := math.Inf(-1)
	for i := range b.n {
		if free[b.tOff+i] == -2 {
			continue
		}
		pi[i] = gam[b.tOff+i]
		for j, bj := range beta {
			pi[i] += bj * x[j][b.start+i]
		}
		mx = max(mx, pi[i])
	}
	z := 0.0
	for i := range b.n {
		if free[b.tOff+i] == -2 {
			pi[i] = 0
			continue
		}
		pi[i] = math.Exp(pi[i] - mx)
		z += pi[i]
	}
	for i := range b.n {
		pi[i] /= z
	}
}
