//go:build validate

package rollout

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/panel"
)

// TestRandomizationAgreesWithModel: on large invented designs (48 units, 16
// per wave, Poisson counts around unequal levels, a 30% fall planted in
// half the worlds) the randomization test of RandomizationEffect and the
// headline's own test reach the same decision at 5% in most worlds; on the
// null worlds its rejection rate is the size. One run: the same decision in
// 39 of 40 worlds, 97.5% [87.1%, 99.6%]; size 0 of 20 null worlds, 0.0%
// [0.0%, 16.1%] (few null worlds: TestRandomizationPSize checks the size on
// 400).
func TestRandomizationAgreesWithModel(t *testing.T) {
	const worlds, n, draws = 40, 48, 99
	ctx := context.Background()
	opts := did.DefaultOptions()
	opts.Draws, opts.Workers = 199, 1
	opts.Window = did.Window{Pre: 6, Post: 12}
	rng := rand.New(rand.NewPCG(11, 12))
	agree, nullRej, nulls := 0, 0, 0
	for w := range worlds {
		pl := inventedPlan(t, n, 3, uint64(500+w), rng)
		// The panel runs from 2024-07 to the month before the evaluation
		// (2025-07); waves 1 and 2 start in 2025-01 and 2025-04, as
		// inventedPlan dates them.
		const T = 12
		starts := map[int]int{1: 6, 2: 9}
		p := &panel.Panel{Start: time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC).AddDate(0, -6, 0), Months: T, Outcomes: []string{"attribute"}, Y: [][]float64{nil}}
		effect := 1.0
		if w%2 == 1 {
			effect = 0.7
		}
		for _, u := range pl.Units {
			ft := -1
			if s, ok := starts[u.Wave]; ok {
				ft = s
			}
			p.Units = append(p.Units, panel.Unit{ID: u.ID, FirstTreated: ft, Weight: 1})
			level := math.Exp(1 + 0.5*rng.NormFloat64())
			for m := range T {
				mu := level
				if ft >= 0 && m >= ft {
					mu *= effect
				}
				k, pr := 0.0, math.Exp(-mu)
				cdf, u01 := pr, rng.Float64()
				for cdf < u01 {
					k++
					pr *= mu / k
					cdf += pr
				}
				p.Y[0] = append(p.Y[0], k)
			}
		}
		es, err := did.Estimate(ctx, p, opts)
		if err != nil {
			t.Fatal(err)
		}
		model := false
		for _, e := range es.Effects {
			if e.Estimator == did.Headline {
				model = e.PValue < 0.05
			}
		}
		ri, err := pl.RandomizationEffect(ctx, p, "attribute", draws, opts)
		if err != nil {
			t.Fatal(err)
		}
		if (ri.P <= 0.05) == model {
			agree++
		}
		if effect == 1 {
			nulls++
			if ri.P <= 0.05 {
				nullRej++
			}
		}
	}
	a, _ := checklist.Wilson(agree, worlds, 0.95)
	s, _ := checklist.Wilson(nullRej, nulls, 0.95)
	t.Logf("same decision in %d of %d worlds: %.1f%% [%.1f%%, %.1f%%]; randomization size on %d null worlds: %.1f%% [%.1f%%, %.1f%%]",
		agree, worlds, 100*a.Estimate, 100*a.Lower, 100*a.Upper, nulls, 100*s.Estimate, 100*s.Lower, 100*s.Upper)
	if a.Estimate < 0.85 {
		t.Errorf("the tests agree in %.1f%% of worlds, want at least 85%%", 100*a.Estimate)
	}
	if s.Lower > 0.05 {
		t.Errorf("randomization size %.1f%% [%.1f%%, %.1f%%] above 5%%", 100*s.Estimate, 100*s.Lower, 100*s.Upper)
	}
}
