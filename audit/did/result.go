package did

import (
	"hash/fnv"
	"math"
	"math/rand/v2"
	"slices"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/panel"
)

// Shared by every estimator: the result of one estimator on one outcome and
// the small helpers around it. Estimator files use these; none calls back
// into the dispatcher (estimate.go).

// estimate is one estimator's result for one outcome.
type estimate struct {
	att, se, lo, hi, p         float64
	rel, relLo, relHi          float64
	hasRel                     bool
	postMean                   float64 // treated post mean m of setRelativeLinear (0: not set)
	noInterval                 bool    // too few treated clusters: p from randomization, no interval
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
	e.postMean = m
	if m-e.att <= 0 || m-e.hi <= 0 {
		e.note += "; relative effect not given: counterfactual mean not positive"
		return
	}
	e.hasRel, e.rel, e.relLo, e.relHi = true, f(e.att), f(e.lo), f(e.hi)
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

// effect converts e to an Effect, reporting false when a number is not robust.Finite.
func (e *estimate) effect(layer, est string) (Effect, bool) {
	eff := Effect{Layer: layer, Estimator: est, ATT: e.att, SE: e.se, PValue: e.p, CI95: [2]float64{e.lo, e.hi},
		TreatedUnits: e.treatedUnits, ControlUnits: e.controlUnits, Method: e.method, Note: e.note, NoInterval: e.noInterval}
	for _, v := range []float64{e.att, e.se, e.p, e.lo, e.hi} {
		if !robust.Finite(v) {
			return eff, false
		}
	}
	if e.hasRel && robust.Finite(e.rel) && robust.Finite(e.relLo) && robust.Finite(e.relHi) {
		rel := e.rel
		eff.RelativeEffect = &rel
		eff.CI95 = [2]float64{e.relLo, e.relHi}
	}
	if e.hasPre && robust.Finite(e.preP) {
		pp := e.preP
		eff.PreTrendP = &pp
	}
	eff.PValue = math.Min(1, math.Max(0, eff.PValue))
	return eff, true
}

// cohortsOf lists the distinct first-treated months of treated units with
// positive weight, ascending.
func cohortsOf(p *panel.Panel) []int {
	seen := map[int]bool{}
	var cs []int
	for _, u := range p.Units {
		if u.FirstTreated >= 0 && u.Weight > 0 && !seen[u.FirstTreated] {
			seen[u.FirstTreated] = true
			cs = append(cs, u.FirstTreated)
		}
	}
	slices.Sort(cs)
	return cs
}
