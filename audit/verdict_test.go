package audit

import (
	"math"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/match"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/study"
)

func rel(x float64) *float64 { return &x }

// TestAgreementVerdicts: the verdict of each robustness check against the
// headline, by the rules on Agreement (invented figures).
func TestAgreementVerdicts(t *testing.T) {
	head := did.Effect{Layer: "attribute", Estimator: did.Headline, RelativeEffect: rel(-0.30), CI95: [2]float64{-0.45, -0.12}, PValue: 0.002}
	for _, c := range []struct {
		name  string
		check did.Effect
		want  string
		alarm bool
	}{
		{"same story", did.Effect{Estimator: did.EstimatorCS, RelativeEffect: rel(-0.25), PValue: 0.01}, VerdictAgree, false},
		{"larger, same sign", did.Effect{Estimator: did.EstimatorCS, RelativeEffect: rel(-0.60), PValue: 0.001}, VerdictDifferSize, false},
		{"not significant", did.Effect{Estimator: did.EstimatorDiD2x2, RelativeEffect: rel(-0.10), PValue: 0.3}, VerdictDifferSign, false},
		{"other sign", did.Effect{Estimator: did.EstimatorTWFELinear, RelativeEffect: rel(0.15), PValue: 0.04}, VerdictDifferSign, true},
		{"no interval, same sign", did.Effect{Estimator: did.EstimatorCS, RelativeEffect: rel(-0.9), PValue: 0.5, NoInterval: true}, VerdictAgree, false},
	} {
		t.Run(c.name, func(t *testing.T) {
			c.check.Layer = "attribute"
			rows, alarms, _ := robustness([]did.Effect{head, c.check})
			if len(rows) != 1 || rows[0].Verdict != c.want {
				t.Fatalf("rows %+v, want verdict %q", rows, c.want)
			}
			if rows[0].Verdict != VerdictAgree && !strings.Contains(rows[0].Explanation, c.check.Estimator) {
				t.Errorf("explanation %q does not say how %s differs", rows[0].Explanation, c.check.Estimator)
			}
			if (len(alarms) > 0) != c.alarm {
				t.Errorf("alarms %v, want alarm %v", alarms, c.alarm)
			}
		})
	}
}

// TestRobustnessAlarmFamily: a sign disagreement warns only on a headline
// layer whose headline stays significant after Holm's adjustment across the
// layers; on a finer outcome, or when the adjustment leaves it above 5%, it
// is a note (invented figures).
func TestRobustnessAlarmFamily(t *testing.T) {
	eff := func(layer, est string, r, p float64) did.Effect {
		return did.Effect{Layer: layer, Estimator: est, RelativeEffect: rel(r), CI95: [2]float64{r - 0.1, r + 0.1}, PValue: p}
	}
	for _, c := range []struct {
		name         string
		effects      []did.Effect
		alarm, notes int
	}{
		{"significant layer", []did.Effect{eff("deletion", did.Headline, -0.4, 0.001), eff("deletion", did.EstimatorCS, 0.2, 0.3),
			eff("deletion", did.EstimatorTWFELinear, 0.1, 0.5), eff("geometry", did.Headline, 0.01, 0.9)}, 1, 0},
		{"finer outcome", []did.Effect{eff("attribute:poi", did.Headline, -0.7, 0.005), eff("attribute:poi", did.EstimatorCS, 0.4, 0.3)}, 0, 1},
		// Holm across four layers: the smallest p-value 0.02 becomes 0.08.
		{"not significant after Holm", []did.Effect{eff("geometry", did.Headline, 0.3, 0.02), eff("geometry", did.EstimatorCS, -0.1, 0.4),
			eff("attribute", did.Headline, 0.1, 0.5), eff("new_feature", did.Headline, 0.1, 0.6), eff("deletion", did.Headline, 0.1, 0.7)}, 0, 1},
		{"not significant", []did.Effect{eff("geometry", did.Headline, 0.3, 0.2), eff("geometry", did.EstimatorCS, -0.1, 0.4)}, 0, 0},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, alarms, notes := robustness(c.effects)
			if len(alarms) != c.alarm || len(notes) != c.notes {
				t.Fatalf("alarms %q, notes %q; want %d and %d", alarms, notes, c.alarm, c.notes)
			}
			if c.alarm > 0 && !strings.HasPrefix(alarms[0], "deletion: the headline finds that deletions fell by 40%, but 2 robustness checks point the other way") {
				t.Errorf("alarm not in plain words first: %q", alarms[0])
			}
		})
	}
}

// TestOrderWarnings: warnings come in order of importance whatever order the
// estimators gave them in.
func TestOrderWarnings(t *testing.T) {
	got := orderWarnings([]string{"deletion: sign"},
		[]string{"2 treated unit(s) treated in the first month have no pre-period", "geometry: ppml-twfe: separated",
			"attribute: before the import, import areas and comparison areas moved apart"},
		[]string{"new_feature: grew"})
	want := []string{"deletion: sign", "attribute: before the import, import areas and comparison areas moved apart",
		"new_feature: grew", "geometry: ppml-twfe: separated", "2 treated unit(s) treated in the first month have no pre-period"}
	if strings.Join(got, "|") != strings.Join(want, "|") {
		t.Errorf("order\n%q\nwant\n%q", got, want)
	}
}

// TestGrowthWarnings: the growth test counts matched controls by their
// effective number (Σw)²/Σw² and takes t(n_t − 1). Worked by hand: n_t = 8,
// eight controls of weight 1 give n_c = 8, standard error √(1/8+1/8) = 0.5,
// so a difference of 1.5 standard deviations is t = 3.0, two-sided
// p = 0.01996 on 7 degrees of freedom (t tables: the 99% quantile of t(7) is 2.998; common practice), 0.0399
// after Holm across two rows; the same controls with weights 4,4,0.25...
// count as n_c = 64/32.375 ≈ 1.98 and t ≈ 1.89: no warning.
func TestGrowthWarnings(t *testing.T) {
	rows := []match.BalanceRow{{Name: study.GrowthPrefix + "deletion", MatchedSMD: 1.5}, {Name: study.GrowthPrefix + "geometry", MatchedSMD: 0.1}}
	even := []float64{1, 1, 1, 1, 1, 1, 1, 1}
	uneven := []float64{4, 4, 0.25, 0.25, 0.25, 0.25, 0.25, 0.25}
	if got := growthWarnings(rows, 8, even); len(got) != 1 || !strings.Contains(got[0], "p = 0.0399") {
		t.Errorf("even weights: %q, want one warning with p = 0.0399", got)
	}
	if got := growthWarnings(rows, 8, uneven); len(got) != 0 {
		t.Errorf("uneven weights: %q, want none", got)
	}
}

// TestUnitFigures: observed and expected edits of one import area worked by
// hand (invented counts). Unit t starts in month 2 of 4; window 2 before, 2
// after. Own pre edits 3+5 = 8; controls' weighted edits before 10+10 and
// 0.5·(4+4), after 12+14 and 0.5·(6+6): growth (26+6)/(20+4) = 4/3, so
// expected 8·4/3 and observed 7+9 = 16.
func TestUnitFigures(t *testing.T) {
	p := &panel.Panel{Start: time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC), Months: 4, Outcomes: []string{"attribute"},
		Units: []panel.Unit{{ID: "t", FirstTreated: 2, Weight: 1}, {ID: "c1", FirstTreated: -1, Weight: 1}, {ID: "c2", FirstTreated: -1, Weight: 0.5}},
		Y:     [][]float64{{3, 5, 7, 9, 10, 10, 12, 14, 4, 4, 6, 6}}}
	got := unitFigures(p, did.Window{Pre: 2, Post: 2})
	if len(got) != 1 || got[0].Unit != "t" || got[0].Observed != 16 || math.Abs(got[0].Expected-8*4.0/3) > 1e-12 {
		t.Errorf("figures %+v, want t observed 16, expected %.4f", got, 8*4.0/3)
	}
}
