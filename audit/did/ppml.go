package did

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/did/poisson"
	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/panel"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// ppml-twfe: each cohort stacked with its clean comparison units, fitted by
// audit/did/poisson (Poisson pseudo-maximum likelihood with unit and month
// fixed effects; Santos Silva & Tenreyro 2006; Wooldridge 1999). Groups
// whose outcome is zero throughout carry no information on β and are
// dropped and counted. Inference: see inference.go (the score bootstrap with
// the null imposed, or a randomization test with too few treated clusters).

// stacked is the cohort-stacked design of one outcome.
type stacked struct {
	y, d, w                   []float64
	f1, f2, cl                []int
	ev                        []int // event time t − g of treated rows; noEvent for controls
	n1, n2                    int
	blocks                    []poisson.Block
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
	blocks := make([]poisson.Block, 0, nb)
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
			blocks = append(blocks, poisson.Block{Start: len(yy), N: hi - lo, TOff: n2})
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
	fit, err := poisson.FitStacked(st.y, [][]float64{st.d}, st.w, st.cl, G, st.blocks, st.n2)
	if err != nil {
		return nil, err
	}
	b := fit.Beta[0]
	se := math.Sqrt(fit.Vcov.At(0, 0))
	if !(se > 0) {
		return nil, errSingular
	}
	H := min(len(tClusters), fit.G-len(tClusters))
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
		len(cohorts), opts.Window.Pre, opts.Window.Post, b, se, len(tClusters), fit.G-len(tClusters))
	if e.noInterval {
		e.note += fmt.Sprintf("; with fewer than %d treated clusters no interval is reliable: p is the randomization test re-dealing the import's start months over the eligible units", infer.MinTreatedForInterval)
	}
	if fit.Dropped1 > 0 {
		e.note += fmt.Sprintf("; %d stacked unit(s) with all-zero outcome dropped (no information under unit fixed effects)", fit.Dropped1)
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
		f, err := poisson.FitStackedAt(st.y, [][]float64{st.d}, st.w, st.cl, G, st.blocks, st.n2, []float64{b0 / a[0]})
		if err != nil {
			return infer.ScoreFit{}, err
		}
		return infer.ScoreFit{Scores: f.Scores, Hessian: f.Hess, NObs: f.NObs, NParams: f.KParams}, nil
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
// treatment coefficient is −∞ (or +∞) and no robust.Finite estimate exists.
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
		fit, err := poisson.FitStacked(st.y, [][]float64{st.d}, st.w, st.cl, G, st.blocks, st.n2)
		if err != nil {
			return 0, err
		}
		return fit.Beta[0], nil
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
// and the joint test that the leads (e < −1) are zero (robust.LeadTest with H
// clusters). An event month whose treated counts are all zero has no robust.Finite
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
	fit, err := poisson.FitStacked(st.y, x, st.w, st.cl, G, st.blocks, st.n2)
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
		b, se := fit.Beta[j], math.Sqrt(fit.Vcov.At(j, j))
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
			bl[a] = fit.Beta[j]
			for b2, k := range leads {
				if b2 >= a {
					vl.SetSym(a, b2, fit.Vcov.At(j, k))
				}
			}
		}
		if p, ok := robust.LeadTest(bl, vl, H); ok {
			out.preP, out.hasPre = p, true
			out.note = strings.TrimPrefix(out.note+fmt.Sprintf("; pre_trend_p: joint test of the %d leads of this event study (F with %d clusters)", len(leads), H), "; ")
		}
	}
	return out, nil
}
