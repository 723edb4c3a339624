package audit

import (
	"fmt"
	"math"
	"strings"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/study"
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

// robustness compares every robustness estimator with the headline, layer by
// layer, and returns the comparisons and, first in line for the warnings,
// the layers where a significant headline meets a check of the other sign.
func robustness(effects []did.Effect) (rows []Agreement, alarms []string) {
	head := map[string]did.Effect{}
	for _, e := range effects {
		if e.Estimator == did.Headline && e.RelativeEffect != nil {
			head[e.Layer] = e
		}
	}
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
			alarms = append(alarms, fmt.Sprintf("%s: the headline (%s) finds %+.0f%% (p = %.3g) but %s finds %+.0f%%: the direction of the change depends on how it is measured; read the robustness section before relying on it",
				c.Layer, did.Headline, 100*a.Headline, h.PValue, c.Estimator, 100*a.Relative))
		}
	}
	return rows, alarms
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
// larger than chance: the z statistic SMD/√(1/n_t + 1/n_c) (the standardized
// difference of two means, pooled standard deviation) rejects at 5% after
// Holm's adjustment across the layers. Level differences are shown in the
// balance table as information only: unit fixed effects absorb them.
func growthWarnings(rows []match.BalanceRow, nt, nc int) []string {
	if nt < 1 || nc < 1 {
		return nil
	}
	var ps []float64
	var sel []match.BalanceRow
	for _, b := range rows {
		if strings.HasPrefix(b.Name, study.GrowthPrefix) && !math.IsNaN(b.MatchedSMD) {
			z := b.MatchedSMD / math.Sqrt(1/float64(nt)+1/float64(nc))
			ps = append(ps, 2*distuv.UnitNormal.Survival(math.Abs(z)))
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
			out = append(out, fmt.Sprintf("%s: import areas grew differently from their comparison areas before the import (%s, standardized difference %+.2f, p = %.3g after Holm's adjustment across %d layers); level differences are absorbed by the unit fixed effects, growth differences are not",
				strings.TrimPrefix(b.Name, study.GrowthPrefix), b.Name, b.MatchedSMD, adj[i], len(ps)))
		}
	}
	return out
}
