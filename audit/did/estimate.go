package did

import (
	"context"
	"errors"
	"fmt"
	"runtime"
	"sync"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/panel"
)

// Estimator names used in Effect.Estimator.
// Estimate estimates, for every outcome of p, the change in the treated
// units against the matched never-treated controls with each estimator, its
// event study, pre-trend test and placebo. Problems with one outcome (all
// zeros, too few units, a singular design) become warnings and leave that
// outcome's rows out; the other outcomes are still estimated. An error is
// returned only for an invalid panel or options, or cancellation. Output
// never holds NaN or Inf.
func Estimate(ctx context.Context, p *panel.Panel, opts Options) (*Estimates, error) {
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
		Effects: []Effect{}, EventStudy: []EventStudyRow{}, ByCohort: []CohortRow{}, Placebo: []PlaceboRow{}, Warnings: []string{}, Notes: []string{}}
	cl, G := p.ClusterIndex()
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
	if h := min(len(tcl), G-len(tcl)); h < infer.MinTreatedForInterval {
		out.Notes = append(out.Notes, fmt.Sprintf("only %d treated clusters: no interval is reliable with fewer than %d; the %s p-values come from a randomization test over the eligible comparison areas",
			h, infer.MinTreatedForInterval, Headline))
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
			results[o] = estimateOutcome(ctx, p, o, cl, G, opts, design, desErr, dr)
		}()
	}
	wg.Wait()
	if err := ctx.Err(); err != nil {
		return nil, err
	}
	// Warnings in order of importance: trends that moved apart before the
	// import first, then outcomes the headline could not estimate, then
	// units left out (above).
	pre, preNotes := preTrendWarnings(p.Outcomes, results, opts)
	problems := []string{}
	for _, r := range results {
		out.Effects = append(out.Effects, r.effects...)
		out.EventStudy = append(out.EventStudy, r.events...)
		out.ByCohort = append(out.ByCohort, r.cohorts...)
		out.Placebo = append(out.Placebo, r.placebo...)
		problems = append(problems, r.warnings...)
		out.Notes = append(out.Notes, r.notes...)
	}
	out.Warnings = append(append(pre, problems...), out.Warnings...)
	out.Notes = append(out.Notes, preNotes...)
	return out, nil
}

// preTrendWarnings warns for each outcome of the warning family
// (Options.Family) whose headline pre-trend test rejects at 5% after Holm's
// adjustment across the family (an audit tests every layer, and unadjusted
// tests would raise an alarm on some layer of most audits with parallel
// trends). Outcomes outside the family get a note when their own test
// rejects at 5%.
func preTrendWarnings(names []string, results []outcomeResult, opts Options) (warnings, notes []string) {
	var ps []float64
	var idx []int
	for o, r := range results {
		switch {
		case !r.headHas:
		case opts.inFamily(names[o]):
			ps = append(ps, r.headPre)
			idx = append(idx, o)
		case r.headPre < 0.05:
			notes = append(notes, fmt.Sprintf("%s: before the import, import areas and comparison areas moved apart (%s joint test of the event study's leads: p = %.3g, not adjusted; a finer outcome, shown as information)",
				names[o], Headline, r.headPre))
		}
	}
	adj, err := infer.Holm(ps)
	if err != nil {
		return nil, notes
	}
	for i, o := range idx {
		if adj[i] < 0.05 {
			warnings = append(warnings, fmt.Sprintf("%s: before the import, import areas and comparison areas moved apart, so the comparison may not show what would have happened without the import — %s joint test of the event study's leads: p = %.3g, %.3g after Holm's adjustment across %d outcomes",
				names[o], Headline, ps[i], adj[i], len(ps)))
		}
	}
	return warnings, notes
}

type outcomeResult struct {
	effects  []Effect
	events   []EventStudyRow
	cohorts  []CohortRow
	placebo  []PlaceboRow
	warnings []string
	notes    []string
	headPre  float64 // the headline's joint lead test, when headHas
	headHas  bool
}

func estimateOutcome(ctx context.Context, p *panel.Panel, o int, cl []int, G int, opts Options, design *esDesign, desErr error, dr bool) outcomeResult {
	name := p.Outcomes[o]
	y := p.Y[o]
	var r outcomeResult
	note := func(format string, args ...any) {
		r.notes = append(r.notes, fmt.Sprintf("%s: ", name)+fmt.Sprintf(format, args...))
	}
	// Problems of an outcome outside the warning family are information.
	warn := note
	if opts.inFamily(name) {
		warn = func(format string, args ...any) {
			r.warnings = append(r.warnings, fmt.Sprintf("%s: ", name)+fmt.Sprintf(format, args...))
		}
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
		// Problems with the headline are warnings; with the robustness
		// estimators, information (notes), so that one audit raises few
		// alarms (the headline's pre-trend tests are Holm-adjusted across
		// outcomes in Estimate).
		flag := note
		if est == Headline {
			flag = warn
		}
		if err != nil {
			if errors.Is(err, errSingular) {
				flag("%s: singular design: %v", est, err)
			} else {
				flag("%s: %v", est, err)
			}
			return
		}
		eff, ok := e.effect(name, est)
		if !ok {
			flag("%s: estimate not robust.Finite (too little variation); left out", est)
			return
		}
		r.effects = append(r.effects, eff)
		switch {
		case est == Headline:
			r.headPre, r.headHas = e.preP, e.hasPre
		case e.hasPre && e.preP < 0.05:
			note("%s (robustness check): its pre-trend test gives p = %.3g", est, e.preP)
		}
		scale := ScaleCount
		if est == EstimatorPPML {
			scale = ScaleRelative
		}
		for _, ev := range e.events {
			row := EventStudyRow{Layer: name, Estimator: est, Scale: scale, EventTime: ev.e, Estimate: ev.est, CI95: [2]float64{ev.lo, ev.hi}, SE: ev.se}
			if ev.reference {
				row.CI95 = [2]float64{0, 0}
			}
			if robust.Finite(row.Estimate) && robust.Finite(row.SE) && robust.Finite(row.CI95[0]) && robust.Finite(row.CI95[1]) {
				r.events = append(r.events, row)
			}
		}
		for _, c := range e.cohorts {
			row := CohortRow{Layer: name, Estimator: est, Cohort: p.MonthTime(c.g).Format("2006-01"), Units: c.units,
				ATT: c.est, CI95: [2]float64{c.lo, c.hi}, SE: c.se}
			if robust.Finite(row.ATT) && robust.Finite(row.SE) && robust.Finite(row.CI95[0]) && robust.Finite(row.CI95[1]) {
				r.cohorts = append(r.cohorts, row)
			}
		}
	}
	// cs-att
	cs, err := callawaySantAnna(p, y, cl, G, opts, rngFor(opts.Seed, name, EstimatorCS), dr)
	if err != nil && dr {
		// A robustness check's problem: information, not an alarm.
		note("cs-att: doubly robust estimator failed (%v); unconditional estimator used", err)
		cs, err = callawaySantAnna(p, y, cl, G, opts, rngFor(opts.Seed, name, EstimatorCS), false)
	}
	if err == nil {
		cs.overall.events = cs.events
		cs.overall.preP, cs.overall.hasPre = cs.preP, cs.hasPreP
		add(EstimatorCS, cs.overall, nil)
		if pl, err := placeboCS(p, y, cl, G, opts, rngFor(opts.Seed, name, "placebo")); err == nil {
			r.placebo = append(r.placebo, pl.row(name, opts.PlaceboShift)...)
			if len(pl.row(name, opts.PlaceboShift)) > 0 && pl.p < 0.05 {
				note("cs-att placebo %d months early (robustness check) gives p = %.3g", opts.PlaceboShift, pl.p)
			}
		} else {
			note("placebo: %v", err)
		}
	} else {
		add(EstimatorCS, nil, err)
	}
	pp, err := stackedPPML(ctx, p, y, cl, G, opts, rngFor(opts.Seed, name, EstimatorPPML))
	add(EstimatorPPML, pp, err)
	if desErr != nil {
		add(EstimatorTWFELinear, nil, desErr)
	} else {
		tw, err := twfeEventStudy(ctx, design, y, cl, G, opts, rngFor(opts.Seed, name, EstimatorTWFELinear))
		add(EstimatorTWFELinear, tw, err)
	}
	dd, err := did2x2(ctx, p, y, cohortsWithPre(p), cl, G, opts, rngFor(opts.Seed, name, EstimatorDiD2x2))
	add(EstimatorDiD2x2, dd, err)
	return r
}

// cohortsWithPre lists the cohorts that have at least one pre-period month.
func cohortsWithPre(p *panel.Panel) []int {
	var out []int
	for _, g := range cohortsOf(p) {
		if g >= 1 {
			out = append(out, g)
		}
	}
	return out
}
