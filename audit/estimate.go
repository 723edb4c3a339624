package audit

import (
	"context"
	"errors"
	"fmt"
	"hash/fnv"
	"math"
	"math/rand/v2"
	"runtime"
	"sync"
)

// Estimator names used in Effect.Estimator.
const (
	EstimatorCS         = "cs-att"      // Callaway & Sant'Anna group-time ATT, aggregated
	EstimatorPPML       = "ppml-twfe"   // Poisson PML, stacked by cohort, unit and month fixed effects
	EstimatorTWFELinear = "twfe-linear" // linear event study, mean of lags
	EstimatorDiD2x2     = "did-2x2"     // classic 2x2 difference-in-differences
)

// Inference modes of EstimateOptions.Inference.
const (
	InferenceAuto      = "auto"      // bootstrap when treated clusters < FewTreatedClusters, else analytic
	InferenceAnalytic  = "analytic"  // always analytic
	InferenceBootstrap = "bootstrap" // always bootstrap
)

// Window is the event window around each cohort's first treated month: Pre
// months before (event times −Pre..−1) and Post months from it (0..Post−1).
type Window struct {
	Pre  int `json:"pre"`
	Post int `json:"post"`
}

// EstimateOptions configures Estimate. Start from DefaultEstimateOptions.
type EstimateOptions struct {
	Window       Window // event window; estimators use only these months around treatment
	Draws        int    // bootstrap draws (999)
	Seed         uint64 // seed of every random draw; equal seeds give equal output
	Inference    string // InferenceAuto, InferenceAnalytic or InferenceBootstrap
	PlaceboShift int    // months the placebo moves each start back (default Window.Pre/2, at least 1)
	Workers      int    // outcomes estimated in parallel; 0 = GOMAXPROCS
}

// DefaultEstimateOptions returns the defaults: a window of 12 months before
// and 24 from treatment, 999 bootstrap draws, seed 1, automatic inference,
// placebo shift 6 months.
func DefaultEstimateOptions() EstimateOptions {
	return EstimateOptions{Window: Window{Pre: 12, Post: 24}, Draws: 999, Seed: 1, Inference: InferenceAuto, PlaceboShift: 6}
}

func (o EstimateOptions) useBootstrap(treatedClusters int) bool {
	switch o.Inference {
	case InferenceBootstrap:
		return true
	case InferenceAnalytic:
		return false
	}
	return treatedClusters < FewTreatedClusters
}

func (o EstimateOptions) validate() error {
	switch {
	case o.Window.Pre < 1 || o.Window.Post < 1:
		return fmt.Errorf("audit: event window needs at least 1 month before and after, got %d and %d", o.Window.Pre, o.Window.Post)
	case o.Draws < 99:
		return fmt.Errorf("audit: %d bootstrap draws; use at least 99", o.Draws)
	case o.Inference != InferenceAuto && o.Inference != InferenceAnalytic && o.Inference != InferenceBootstrap:
		return fmt.Errorf("audit: inference %q; want auto, analytic or bootstrap", o.Inference)
	case o.PlaceboShift < 0:
		return fmt.Errorf("audit: placebo shift %d months is negative", o.PlaceboShift)
	}
	return nil
}

// Effect is one estimate of how an outcome changed in treated (import) units
// relative to matched controls. CI95 is the 95% interval of RelativeEffect
// when RelativeEffect is set, otherwise of ATT. ATT is in outcome units
// (events per unit-month); RelativeEffect is ATT over the treated units'
// counterfactual mean (post-period treated mean − ATT); for ppml-twfe it is
// exp(b) − 1. Null fields were not computed (see Note).
type Effect struct {
	Layer          string     `json:"layer"`
	Estimator      string     `json:"estimator"`
	ATT            float64    `json:"att"`
	RelativeEffect *float64   `json:"relative_effect"`
	CI95           [2]float64 `json:"ci95"`
	SE             float64    `json:"se"`
	PValue         float64    `json:"p_value"`
	PreTrendP      *float64   `json:"pre_trend_p"`
	TreatedUnits   int        `json:"treated_units"`
	ControlUnits   int        `json:"control_units"`
	Method         string     `json:"method"`
	Note           string     `json:"note"`
}

// EventStudyRow is one event-time coefficient (ATT in outcome units; the
// reference period −1 of twfe-linear is 0 by construction and listed with
// zero interval).
type EventStudyRow struct {
	Layer     string     `json:"layer"`
	Estimator string     `json:"estimator"`
	EventTime int        `json:"event_time"`
	Estimate  float64    `json:"estimate"`
	CI95      [2]float64 `json:"ci95"`
	SE        float64    `json:"se"`
}

// PlaceboRow is the cs-att estimate after moving every start date back by
// ShiftMonths into the pre-period, using only months before the real start:
// an effect here signals anticipation or diverging trends.
type PlaceboRow struct {
	Layer       string     `json:"layer"`
	Estimator   string     `json:"estimator"`
	ShiftMonths int        `json:"shift_months"`
	ATT         float64    `json:"att"`
	CI95        [2]float64 `json:"ci95"`
	PValue      float64    `json:"p_value"`
}

// CohortRow is the cs-att effect of one cohort (units first treated in
// Cohort, YYYY-MM), the mean of its group-time ATTs over the post months of
// the window, in outcome units.
type CohortRow struct {
	Layer     string     `json:"layer"`
	Estimator string     `json:"estimator"`
	Cohort    string     `json:"cohort"`
	Units     int        `json:"units"`
	ATT       float64    `json:"att"`
	CI95      [2]float64 `json:"ci95"`
	SE        float64    `json:"se"`
}

// Estimates is the result of Estimate.
type Estimates struct {
	Window     Window          `json:"window"`
	Draws      int             `json:"bootstrap_draws"`
	Seed       uint64          `json:"seed"`
	Effects    []Effect        `json:"effects"`
	EventStudy []EventStudyRow `json:"event_study"`
	ByCohort   []CohortRow     `json:"by_cohort"`
	Placebo    []PlaceboRow    `json:"placebo"`
	Warnings   []string        `json:"warnings"`
	Cautions   []string        `json:"cautions"`
}

// Cautions printed with every set of estimates.
var estimateCautions = []string{
	"These are observational estimates: matched areas approximate what import areas would have seen; check the pre-trend tests and placebo before reading an effect as caused by an import.",
	"Evidence for a community's review, not a verdict: imports follow the community's import guidelines and local review.",
}

// estimate is one estimator's result for one outcome.
type estimate struct {
	att, se, lo, hi, p         float64
	rel, relLo, relHi          float64
	hasRel                     bool
	preP                       float64
	hasPre                     bool
	treatedUnits, controlUnits int
	method, note               string
	events                     []eventPoint
	cohorts                    []cohortPoint
}

// cohortPoint is the ATT of one cohort over its post months in the window.
type cohortPoint struct {
	g, units        int
	est, se, lo, hi float64
}

type eventPoint struct {
	e               int
	est, se, lo, hi float64
	reference       bool
}

// setRelativeLinear sets the relative effect att/(m − att) for a treated
// post mean m, mapping the att interval through the same increasing function
// (m held fixed).
func (e *estimate) setRelativeLinear(m float64) {
	f := func(a float64) float64 { return a / (m - a) }
	if m-e.att <= 0 || m-e.hi <= 0 {
		e.note += "; relative effect not given: counterfactual mean not positive"
		return
	}
	e.hasRel, e.rel, e.relLo, e.relHi = true, f(e.att), f(e.lo), f(e.hi)
}

// Estimate estimates, for every outcome of p, the change in the treated
// units against the matched never-treated controls with each estimator, its
// event study, pre-trend test and placebo. Problems with one outcome (all
// zeros, too few units, a singular design) become warnings and leave that
// outcome's rows out; the other outcomes are still estimated. An error is
// returned only for an invalid panel or options, or cancellation. Output
// never holds NaN or Inf.
func Estimate(ctx context.Context, p *Panel, opts EstimateOptions) (*Estimates, error) {
	if err := opts.validate(); err != nil {
		return nil, err
	}
	if opts.PlaceboShift == 0 {
		opts.PlaceboShift = max(1, opts.Window.Pre/2)
	}
	if err := p.Validate(); err != nil {
		return nil, err
	}
	out := &Estimates{Window: opts.Window, Draws: opts.Draws, Seed: opts.Seed, Cautions: estimateCautions,
		Effects: []Effect{}, EventStudy: []EventStudyRow{}, ByCohort: []CohortRow{}, Placebo: []PlaceboRow{}, Warnings: []string{}}
	cl, G := p.clusterIndex()
	nT, nC, early := 0, 0, 0
	for _, u := range p.Units {
		switch {
		case u.Weight <= 0:
		case u.FirstTreated == 0:
			early++
		case u.FirstTreated > 0:
			nT++
		default:
			nC++
		}
	}
	if early > 0 {
		out.Warnings = append(out.Warnings, fmt.Sprintf("%d treated unit(s) treated in the first month have no pre-period and are left out of cs-att, ppml-twfe and did-2x2", early))
	}
	if nT < 2 || nC < 2 {
		out.Warnings = append(out.Warnings, fmt.Sprintf("%d treated units with a pre-period and %d controls: at least 2 of each are needed; nothing estimated", nT, nC))
		return out, nil
	}
	if G < 2 {
		out.Warnings = append(out.Warnings, "only one cluster: no cluster-robust inference possible; nothing estimated")
		return out, nil
	}
	tcl := map[int]bool{}
	for u, un := range p.Units {
		if un.FirstTreated >= 0 && un.Weight > 0 {
			tcl[cl[u]] = true
		}
	}
	if len(tcl) < FewTreatedClusters {
		out.Warnings = append(out.Warnings, fmt.Sprintf("only %d treated clusters (< %d): intervals use the wild or multiplier bootstrap (inference %q) and t(G-1) quantiles; read them as rough", len(tcl), FewTreatedClusters, opts.Inference))
	}
	design, desErr := newESDesign(p, opts.Window)
	dr := len(p.Units[0].Covariates) > 0
	results := make([]outcomeResult, len(p.Outcomes))
	workers := opts.Workers
	if workers <= 0 {
		workers = runtime.GOMAXPROCS(0)
	}
	sem := make(chan struct{}, workers)
	var wg sync.WaitGroup
	for o := range p.Outcomes {
		wg.Add(1)
		sem <- struct{}{}
		go func() {
			defer wg.Done()
			defer func() { <-sem }()
			if ctx.Err() != nil {
				return
			}
			results[o] = estimateOutcome(p, o, cl, G, opts, design, desErr, dr)
		}()
	}
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	for _, r := range results {
		out.Effects = append(out.Effects, r.effects...)
		out.EventStudy = append(out.EventStudy, r.events...)
		out.ByCohort = append(out.ByCohort, r.cohorts...)
		out.Placebo = append(out.Placebo, r.placebo...)
		out.Warnings = append(out.Warnings, r.warnings...)
	}
	return out, nil
}

type outcomeResult struct {
	effects  []Effect
	events   []EventStudyRow
	cohorts  []CohortRow
	placebo  []PlaceboRow
	warnings []string
}

// rngFor returns the generator of one outcome and estimator, so results do
// not depend on the order outcomes are run in.
func rngFor(seed uint64, outcome, estimator string) *rand.Rand {
	h := fnv.New64a()
	h.Write([]byte(outcome))
	h.Write([]byte{0})
	h.Write([]byte(estimator))
	return rand.New(rand.NewPCG(seed, h.Sum64()))
}

func estimateOutcome(p *Panel, o int, cl []int, G int, opts EstimateOptions, design *esDesign, desErr error, dr bool) outcomeResult {
	name := p.Outcomes[o]
	y := p.Y[o]
	var r outcomeResult
	warn := func(format string, args ...any) {
		r.warnings = append(r.warnings, fmt.Sprintf("%s: ", name)+fmt.Sprintf(format, args...))
	}
	total := 0.0
	for u, un := range p.Units {
		if un.Weight > 0 {
			for t := range p.Months {
				total += y[u*p.Months+t]
			}
		}
	}
	if total == 0 {
		warn("all counts are zero; no estimate")
		return r
	}
	add := func(est string, e *estimate, err error) {
		if err != nil {
			if errors.Is(err, errSingular) {
				warn("%s: singular design: %v", est, err)
			} else {
				warn("%s: %v", est, err)
			}
			return
		}
		eff, ok := e.effect(name, est)
		if !ok {
			warn("%s: estimate not finite (too little variation); left out", est)
			return
		}
		r.effects = append(r.effects, eff)
		if e.hasPre && e.preP < 0.05 {
			warn("%s: pre-trend test fails (p = %.3g): treated and control areas moved differently before the import", est, e.preP)
		}
		for _, ev := range e.events {
			row := EventStudyRow{Layer: name, Estimator: est, EventTime: ev.e, Estimate: ev.est, CI95: [2]float64{ev.lo, ev.hi}, SE: ev.se}
			if ev.reference {
				row.CI95 = [2]float64{0, 0}
			}
			if finite(row.Estimate) && finite(row.SE) && finite(row.CI95[0]) && finite(row.CI95[1]) {
				r.events = append(r.events, row)
			}
		}
		for _, c := range e.cohorts {
			row := CohortRow{Layer: name, Estimator: est, Cohort: p.MonthTime(c.g).Format("2006-01"), Units: c.units,
				ATT: c.est, CI95: [2]float64{c.lo, c.hi}, SE: c.se}
			if finite(row.ATT) && finite(row.SE) && finite(row.CI95[0]) && finite(row.CI95[1]) {
				r.cohorts = append(r.cohorts, row)
			}
		}
	}
	// cs-att
	cs, err := callawaySantAnna(p, y, cl, G, opts, rngFor(opts.Seed, name, EstimatorCS), dr)
	if err != nil && dr {
		warn("cs-att: doubly robust estimator failed (%v); unconditional estimator used", err)
		cs, err = callawaySantAnna(p, y, cl, G, opts, rngFor(opts.Seed, name, EstimatorCS), false)
	}
	if err == nil {
		cs.overall.events = cs.events
		cs.overall.preP, cs.overall.hasPre = cs.preP, cs.hasPreP
		add(EstimatorCS, cs.overall, nil)
		if pl, err := placeboCS(p, y, cl, G, opts, rngFor(opts.Seed, name, "placebo")); err == nil {
			r.placebo = append(r.placebo, pl.row(name, opts.PlaceboShift)...)
			if len(pl.row(name, opts.PlaceboShift)) > 0 && pl.p < 0.05 {
				warn("cs-att placebo %d months early shows an effect (p = %.3g): anticipation or diverging trends", opts.PlaceboShift, pl.p)
			}
		} else {
			warn("placebo: %v", err)
		}
	} else {
		add(EstimatorCS, nil, err)
	}
	pp, err := stackedPPML(p, y, cl, G, opts, rngFor(opts.Seed, name, EstimatorPPML))
	add(EstimatorPPML, pp, err)
	if desErr != nil {
		add(EstimatorTWFELinear, nil, desErr)
	} else {
		tw, err := twfeEventStudy(design, y, cl, G, opts)
		add(EstimatorTWFELinear, tw, err)
	}
	dd, err := did2x2(p, y, cohortsWithPre(p), cl, G, opts, rngFor(opts.Seed, name, EstimatorDiD2x2))
	add(EstimatorDiD2x2, dd, err)
	return r
}

// cohortsWithPre lists the cohorts that have at least one pre-period month.
func cohortsWithPre(p *Panel) []int {
	var out []int
	for _, g := range cohortsOf(p) {
		if g >= 1 {
			out = append(out, g)
		}
	}
	return out
}

// effect converts e to an Effect, reporting false when a number is not finite.
func (e *estimate) effect(layer, est string) (Effect, bool) {
	eff := Effect{Layer: layer, Estimator: est, ATT: e.att, SE: e.se, PValue: e.p, CI95: [2]float64{e.lo, e.hi},
		TreatedUnits: e.treatedUnits, ControlUnits: e.controlUnits, Method: e.method, Note: e.note}
	for _, v := range []float64{e.att, e.se, e.p, e.lo, e.hi} {
		if !finite(v) {
			return eff, false
		}
	}
	if e.hasRel && finite(e.rel) && finite(e.relLo) && finite(e.relHi) {
		rel := e.rel
		eff.RelativeEffect = &rel
		eff.CI95 = [2]float64{e.relLo, e.relHi}
	}
	if e.hasPre && finite(e.preP) {
		pp := e.preP
		eff.PreTrendP = &pp
	}
	eff.PValue = math.Min(1, math.Max(0, eff.PValue))
	return eff, true
}
