package audit

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
)

// One story per report: the headline estimator (did.Headline) gives the
// summary, the charts, the per-unit figures and the assessment; the other
// estimators are robustness checks, each compared with the headline here.

// Verdicts of Agreement.
const (
	VerdictAgree       = "agree"
	VerdictDifferSize  = "differ in size"
	VerdictDifferSign  = "differ in sign or significance"
	VerdictNotComputed = "not computed"
)

// Agreement compares one robustness estimator with the headline on one
// layer: Verdict is VerdictAgree (same direction and significance, the
// check's estimate inside the headline's interval), VerdictDifferSize (same
// direction and significance, the estimate outside that interval) or
// VerdictDifferSign (opposite directions where either is significant, or one
// significant and the other not); when either has no reliable interval, only
// the directions are compared. Explanation says in plain words why
// estimators can differ.
type Agreement struct {
	Layer       string  `json:"layer"`
	Estimator   string  `json:"estimator"`
	Headline    float64 `json:"headline_relative_effect"`
	Relative    float64 `json:"relative_effect"`
	Verdict     string  `json:"verdict"`
	Explanation string  `json:"explanation"`
}

// agreementOf compares check c with headline h (both with relative effects).
func agreementOf(h, c did.Effect) Agreement {
	a := Agreement{Layer: h.Layer, Estimator: c.Estimator, Headline: *h.RelativeEffect, Relative: *c.RelativeEffect}
	sigH, sigC := h.PValue < 0.05, c.PValue < 0.05
	sameSign := math.Signbit(a.Headline) == math.Signbit(a.Relative)
	switch {
	case h.NoInterval || c.NoInterval:
		// Without reliable intervals only the directions can be compared.
		a.Verdict = VerdictAgree
		if !sameSign {
			a.Verdict = VerdictDifferSign
		}
	case sigH != sigC || (!sameSign && (sigH || sigC)):
		a.Verdict = VerdictDifferSign
	case !h.NoInterval && (a.Relative < h.CI95[0] || a.Relative > h.CI95[1]):
		a.Verdict = VerdictDifferSize
	default:
		a.Verdict = VerdictAgree
	}
	if a.Verdict == VerdictAgree {
		a.Explanation = "The check tells the same story as the headline."
		return a
	}
	switch c.Estimator {
	case did.EstimatorCS:
		a.Explanation = "cs-att compares edit counts (differences, not ratios), so busy areas weigh more, and it averages the waves of import areas by their size; the headline compares ratios, wave by wave against clean comparison areas."
	case did.EstimatorTWFELinear:
		a.Explanation = "twfe-linear compares edit counts in one regression over all waves, in which early import areas serve as comparisons for late ones and busy areas weigh more; the headline compares ratios, wave by wave against clean comparison areas."
	case did.EstimatorDiD2x2:
		a.Explanation = "did-2x2 compares average counts before and after in one step, ignoring when each area's import arrived and weighting busy areas more; the headline compares ratios month by month."
	default:
		a.Explanation = "The check measures the change differently from the headline."
	}
	if a.Verdict == VerdictDifferSign {
		a.Explanation = "The two point in different directions or only one finds a clear change. " + a.Explanation
	}
	return a
}

// familyLayers are the outcomes whose findings may raise warnings: the four
// headline layers. Key families and contributor groups are finer outcomes,
// shown as information: an audit of one import estimates a dozen or more,
// and alarms on each would fire on most audits of imports that changed
// nothing.
func familyLayers() []string {
	out := make([]string, len(layers.Layers))
	for i, l := range layers.Layers {
		out[i] = l.String()
	}
	return out
}

// headlineHolm returns the headline's p-value of each family layer with an
// estimate, adjusted by Holm's method across those layers, and how many
// there are.
func headlineHolm(effects []did.Effect) (map[string]float64, int) {
	var names []string
	var ps []float64
	for _, e := range effects {
		if e.Estimator == did.Headline && e.RelativeEffect != nil && slices.Contains(familyLayers(), e.Layer) {
			names = append(names, e.Layer)
			ps = append(ps, e.PValue)
		}
	}
	adj, err := infer.Holm(ps)
	if err != nil {
		return map[string]float64{}, 0
	}
	out := make(map[string]float64, len(names))
	for i, n := range names {
		out[n] = adj[i]
	}
	return out, len(names)
}

// robustness compares every robustness estimator with the headline, layer by
// layer. It returns the comparisons, the alarms (a family layer whose
// headline is significant after Holm's adjustment across the family meets
// checks of the other sign: one warning per layer, first in line), and
// notes for the other sign disagreements of a headline with p < 0.05 (finer
// outcomes, or not significant after the adjustment): information.
func robustness(effects []did.Effect) (rows []Agreement, alarms, notes []string) {
	head := map[string]did.Effect{}
	var order []string
	for _, e := range effects {
		if e.Estimator == did.Headline && e.RelativeEffect != nil {
			head[e.Layer] = e
			order = append(order, e.Layer)
		}
	}
	adj, nFamily := headlineHolm(effects)
	against := map[string][]string{}
	for _, c := range effects {
		h, ok := head[c.Layer]
		if c.Estimator == did.Headline || !ok {
			continue
		}
		if c.RelativeEffect == nil {
			rows = append(rows, Agreement{Layer: c.Layer, Estimator: c.Estimator, Headline: *h.RelativeEffect,
				Verdict: VerdictNotComputed, Explanation: "no relative effect: " + c.Note})
			continue
		}
		a := agreementOf(h, c)
		rows = append(rows, a)
		if h.PValue < 0.05 && math.Signbit(a.Headline) != math.Signbit(a.Relative) {
			against[c.Layer] = append(against[c.Layer], fmt.Sprintf("%s %+.0f%%", c.Estimator, 100*a.Relative))
		}
	}
	for _, l := range order {
		checks := against[l]
		if len(checks) == 0 {
			continue
		}
		h := head[l]
		if p, ok := adj[l]; ok && p < 0.05 {
			alarms = append(alarms, fmt.Sprintf("%s: the headline finds that %s %s by %.0f%%, but %s the other way, so the direction depends on how the change is measured; read the robustness section before relying on it — %s %+.0f%%, p = %.3g (%.3g after Holm's adjustment across %d layers); against it: %s",
				l, layerWords(l), riseFall(*h.RelativeEffect), 100*math.Abs(*h.RelativeEffect), checkWords(len(checks)),
				did.Headline, 100**h.RelativeEffect, h.PValue, p, nFamily, strings.Join(checks, ", ")))
			continue
		}
		why := "a finer outcome"
		if _, ok := adj[l]; ok {
			why = "not significant after Holm's adjustment across the layers"
		}
		notes = append(notes, fmt.Sprintf("%s: the headline (%s) finds %+.0f%% (p = %.3g) but %s (%s; information, not a warning)",
			l, did.Headline, 100**h.RelativeEffect, h.PValue, strings.Join(checks, ", "), why))
	}
	return rows, alarms, notes
}

// layerWords names a layer's edits for a reader.
func layerWords(layer string) string {
	switch layer {
	case "geometry":
		return "edits to shapes and positions"
	case "attribute":
		return "edits to tags"
	case "new_feature":
		return "newly mapped features"
	case "deletion":
		return "deletions"
	}
	return layer
}

func riseFall(x float64) string {
	if x < 0 {
		return "fell"
	}
	return "rose"
}

func checkWords(n int) string {
	if n == 1 {
		return "one robustness check points"
	}
	return fmt.Sprintf("%d robustness checks point", n)
}

// UnitFigure is a descriptive figure for one import area and outcome:
// Observed edits in the months after the import reached it (within the event
// window) against Expected, the area's own edits in the months before times
// the growth its comparison areas saw over the same months. It is a
// description of one area, not an estimate of the import's effect there (one
// area's counts are too noisy for that; the headline pools all areas).
type UnitFigure struct {
	Unit     string  `json:"unit"`
	Layer    string  `json:"layer"`
	Observed float64 `json:"observed"`
	Expected float64 `json:"expected"`
}

// unitFigures computes the UnitFigure of every treated unit of p and outcome,
// over pre months before the start and post months from it. A unit whose
// comparison areas had no edits before is left out.
func unitFigures(p *panel.Panel, win did.Window) []UnitFigure {
	out := []UnitFigure{}
	T := p.Months
	for o, name := range p.Outcomes {
		y := p.Y[o]
		for u, un := range p.Units {
			g := un.FirstTreated
			if g < 1 || un.Weight <= 0 {
				continue
			}
			lo, hi := max(0, g-win.Pre), min(T, g+win.Post)
			var own, cPre, cPost, obs float64
			for t := lo; t < hi; t++ {
				if t < g {
					own += y[u*T+t]
				} else {
					obs += y[u*T+t]
				}
			}
			for c, cu := range p.Units {
				if cu.FirstTreated >= 0 || cu.Weight <= 0 {
					continue
				}
				for t := lo; t < hi; t++ {
					if t < g {
						cPre += cu.Weight * y[c*T+t]
					} else {
						cPost += cu.Weight * y[c*T+t]
					}
				}
			}
			if cPre <= 0 {
				continue
			}
			out = append(out, UnitFigure{Unit: un.ID, Layer: name, Observed: obs, Expected: own * cPost / cPre})
		}
	}
	return out
}

// growthWarnings warns on the balance rows that matter under unit fixed
// effects: pre-import growth per layer (study.GrowthPrefix). A row warns when
// its matched standardized difference is at least match.BalanceThreshold and
// larger than chance after Holm's adjustment across the layers. The test
// statistic is the standardized difference over its standard error
// √(1/n_t + 1/n_c), with n_c the matched controls' effective number
// (Σw)²/Σw² (Kish; controls matched with replacement count less than their
// number), against Student's t with n_t − 1 degrees of freedom (few treated
// units: the treated side's variance is estimated from them alone). Level
// differences are shown in the balance table as information only: unit
// fixed effects absorb them.
func growthWarnings(rows []match.BalanceRow, nt int, controlWeights []float64) []string {
	var sw, sw2 float64
	for _, w := range controlWeights {
		if w > 0 {
			sw += w
			sw2 += w * w
		}
	}
	if nt < 2 || sw2 == 0 {
		return nil
	}
	nc := sw * sw / sw2
	tdist := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(nt - 1)}
	var ps []float64
	var sel []match.BalanceRow
	for _, b := range rows {
		if strings.HasPrefix(b.Name, study.GrowthPrefix) && !math.IsNaN(b.MatchedSMD) {
			z := b.MatchedSMD / math.Sqrt(1/float64(nt)+1/nc)
			ps = append(ps, 2*tdist.Survival(math.Abs(z)))
			sel = append(sel, b)
		}
	}
	adj, err := infer.Holm(ps)
	if err != nil {
		return nil
	}
	var out []string
	for i, b := range sel {
		if adj[i] < 0.05 && math.Abs(b.MatchedSMD) >= match.BalanceThreshold {
			l := strings.TrimPrefix(b.Name, study.GrowthPrefix)
			out = append(out, fmt.Sprintf("%s: before the import, %s grew at a different pace in import areas than in their comparison areas, which the comparison does not correct for (it corrects for different levels, not different growth) — %s, standardized difference %+.2f, p = %.3g after Holm's adjustment across %d layers",
				l, layerWords(l), b.Name, b.MatchedSMD, adj[i], len(ps)))
		}
	}
	return out
}

// controlWeights returns the matching weights of p's control units.
func controlWeights(p *panel.Panel) []float64 {
	var w []float64
	for _, u := range p.Units {
		if u.FirstTreated < 0 && u.Weight > 0 {
			w = append(w, u.Weight)
		}
	}
	return w
}

// Warning ranks, most important first: a reviewer sees the first few.
const (
	rankNothing  = iota // nothing could be estimated
	rankSign            // a significant headline contradicted in sign
	rankPreTrend        // trends moved apart before the import
	rankGrowth          // pre-import growth differs
	rankProblem         // a layer the headline could not estimate
	rankOther           // units left out and the like
)

// orderWarnings merges the robustness alarms, the estimators' warnings and
// the growth warnings in order of importance (the rank constants; stable
// within a rank).
func orderWarnings(alarms, estimates, growth []string) []string {
	type ranked struct {
		rank int
		msg  string
	}
	var all []ranked
	for _, m := range alarms {
		all = append(all, ranked{rankSign, m})
	}
	for _, m := range estimates {
		rank := rankOther
		head, _, named := strings.Cut(m, ": ")
		switch {
		case strings.Contains(m, "nothing estimated"):
			rank = rankNothing
		case strings.Contains(m, "moved apart"):
			rank = rankPreTrend
		case named && slices.Contains(familyLayers(), head):
			rank = rankProblem
		}
		all = append(all, ranked{rank, m})
	}
	for _, m := range growth {
		all = append(all, ranked{rankGrowth, m})
	}
	slices.SortStableFunc(all, func(a, b ranked) int { return a.rank - b.rank })
	out := make([]string, 0, len(all))
	for _, r := range all {
		out = append(out, r.msg)
	}
	return out
}
