package audit

import (
	"math"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/panel"
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
			rows, alarms := robustness([]did.Effect{head, c.check})
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
