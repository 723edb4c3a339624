package audit_test

import (
	"context"
	"math"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/internal/simtest"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/rules"
)

// auditWhole audits every planted import of a simulated world as one import
// (the changesets of truth.json), so that all treated districts count.
func auditWhole(tb testing.TB, w *worldtest.World, draws int) *audit.Report {
	tb.Helper()
	ctx := context.Background()
	named, err := episode.Detect(ctx, w.Store, rules.Default(), episode.Options{Changesets: w.Truth.ImportChangesets})
	if err != nil {
		tb.Fatal(err)
	}
	eo := did.DefaultOptions()
	eo.Draws = draws
	rep, err := audit.Run(ctx, w.Store, &named[0], w.Episodes, w.Units, audit.Options{Estimate: eo})
	if err != nil {
		tb.Fatal(err)
	}
	return rep
}

func effectOf(tb testing.TB, rep *audit.Report, layer, estimator string) did.Effect {
	tb.Helper()
	for _, e := range rep.Effects {
		if e.Layer == layer && e.Estimator == estimator {
			if e.RelativeEffect == nil {
				tb.Fatalf("%s %s: no relative effect (%s)", layer, estimator, e.Note)
			}
			return e
		}
	}
	tb.Fatalf("no %s effect for %s; warnings: %v", estimator, layer, rep.Warnings)
	return did.Effect{}
}

// TestAuditRecoversPlantedEffects is the check that matters most: on the
// simulator's default world (invented data with known effects: attribute
// ×0.7, new_feature ×1.2, geometry and deletion ×1) the whole pipeline,
// ingest → classify → detect → panel → match → estimate, recovers each planted
// relative effect with the Poisson fixed-effects estimator (the simulator's
// counts are Poisson-gamma with multiplicative effects, the model ppml-twfe
// estimates): the truth lies inside the 95% interval and within 0.05 of the
// estimate.
func TestAuditRecoversPlantedEffects(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates, ingests and audits a world")
	}
	w := worldtest.Shared(t, sim.DefaultConfig())
	rep := auditWhole(t, w, 499)
	truth := map[string]float64{
		"geometry":    w.Truth.Effects.Geometry - 1,
		"attribute":   w.Truth.Effects.Attribute - 1,
		"new_feature": w.Truth.Effects.NewFeature - 1,
		"deletion":    w.Truth.Effects.Deletion - 1,
	}
	for layer, want := range truth {
		e := effectOf(t, rep, layer, "ppml-twfe")
		got := *e.RelativeEffect
		t.Logf("%s: planted %+.3f, ppml-twfe %+.3f [%+.3f, %+.3f] (%s)", layer, want, got, e.CI95[0], e.CI95[1], e.Method)
		if want < e.CI95[0] || want > e.CI95[1] {
			t.Errorf("%s: planted %+.3f outside the 95%% interval [%+.3f, %+.3f]", layer, want, e.CI95[0], e.CI95[1])
		}
		if math.Abs(got-want) > 0.05 {
			t.Errorf("%s: estimate %+.3f more than 0.05 from the planted %+.3f", layer, got, want)
		}
	}
	if rep.Units.Treated != countTreated(w.Truth) {
		t.Errorf("%d treated units, truth.json plants %d", rep.Units.Treated, countTreated(w.Truth))
	}
}

func countTreated(t *sim.Truth) int {
	n := 0
	for _, d := range t.Districts {
		if d.Cohort > 0 {
			n++
		}
	}
	return n
}

// TestAuditNullWorld: with every multiplier 1 the estimates show no effect
// (each 95% interval covers zero).
func TestAuditNullWorld(t *testing.T) {
	if testing.Short() || !simtest.Validate {
		t.Skip("a default-size world; make validate runs it beside the 200-world null study")
	}
	cfg := sim.DefaultConfig()
	cfg.Seed = 5
	cfg.Effects = sim.Effects{Geometry: 1, Attribute: 1, NewFeature: 1, Deletion: 1}
	w := worldtest.Build(t, cfg)
	rep := auditWhole(t, w, 499)
	for _, layer := range []string{"geometry", "attribute", "new_feature", "deletion"} {
		e := effectOf(t, rep, layer, "ppml-twfe")
		if e.CI95[0] > 0 || e.CI95[1] < 0 {
			t.Errorf("%s: null world, yet interval [%+.3f, %+.3f]", layer, e.CI95[0], e.CI95[1])
		}
	}
}

// TestAuditFlagsDivergingTrends: where treated districts were already growing
// faster before the import (parallel trends fail by construction), the
// pre-trend tests say so.
func TestAuditFlagsDivergingTrends(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates, ingests and audits a world")
	}
	cfg := sim.DefaultConfig()
	cfg.TrendSelection = true
	w := worldtest.Build(t, cfg)
	rep := auditWhole(t, w, 199)
	flagged := 0
	for _, layer := range []string{"geometry", "attribute", "new_feature"} {
		e := effectOf(t, rep, layer, "ppml-twfe")
		if e.PreTrendP != nil && *e.PreTrendP < 0.05 {
			flagged++
		}
	}
	if flagged < 2 {
		t.Errorf("diverging pre-trends flagged in %d of 3 layers; warnings: %v", flagged, rep.Warnings)
	}
}
