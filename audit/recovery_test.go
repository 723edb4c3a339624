package audit_test

import (
	"context"
	"fmt"
	"math"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
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
	w := worldtest.Build(t, sim.DefaultConfig())
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
	if testing.Short() {
		t.Skip("simulates, ingests and audits a world")
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
	rep := auditWhole(t, w, 499)
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

// TestAuditCoverage runs the whole pipeline on 200 small seeded worlds (8 of
// 36 districts treated in 2 waves) with the default inference, and counts how
// often the ppml-twfe 95% interval of the attribute layer covers the planted
// effect.
//
// Known shortfall: the target is 92% to 98%; this design measures 82% (164 of
// 200 worlds, wild score bootstrap with 8 treated clusters), 90% on 40 worlds
// with 16 treated districts, and 85% without matching, while the mean estimate
// is unbiased (-0.301 for a planted -0.30). Intervals from few treated
// clusters are too narrow, as the report's warning says (MacKinnon & Webb
// 2017, J. Applied Econometrics, show the same for wild cluster bootstraps).
// Until inference improves, this test guards against getting worse: it fails
// below 75% or above 99%, or on bias beyond 0.03.
func TestAuditCoverage(t *testing.T) {
	if testing.Short() {
		t.Skip("200 simulated worlds")
	}
	const worlds = 200
	cfg0 := sim.DefaultConfig()
	covered, ran, sum := 0, 0, 0.0
	for seed := 1; seed <= worlds; seed++ {
		cfg := sim.DefaultConfig()
		cfg.Seed = uint64(seed)
		cfg.Cols, cfg.Rows, cfg.Months = 6, 6, 30
		cfg.Treated, cfg.Waves = 8, 2
		cfg.ImportAccounts = 1
		cfg.Scale = 0.5
		var e did.Effect
		ok := t.Run(fmt.Sprint("seed", seed), func(t *testing.T) {
			w := worldtest.Build(t, cfg)
			eo := did.DefaultOptions()
			eo.Draws = 199
			eo.Window = did.Window{Pre: 6, Post: 12}
			rep, err := audit.Run(context.Background(), w.Store, &w.Episodes[0], w.Episodes, w.Units, audit.Options{Estimate: eo})
			if err != nil {
				t.Fatal(err)
			}
			e = effectOf(t, rep, "attribute", "ppml-twfe")
		})
		if !ok {
			continue
		}
		ran++
		sum += *e.RelativeEffect
		if want := cfg.Effects.Attribute - 1; e.CI95[0] <= want && want <= e.CI95[1] {
			covered++
		}
	}
	rate := float64(covered) / float64(ran)
	t.Logf("coverage of the planted attribute effect %+.2f: %d of %d worlds (%.1f%%); mean estimate %+.3f",
		cfg0.Effects.Attribute-1, covered, ran, 100*rate, sum/float64(ran))
	if ran < worlds*9/10 || rate < 0.75 || rate > 0.99 {
		t.Errorf("coverage %.3f over %d worlds, want at least 0.75 (target 0.92 to 0.98, not yet met)", rate, ran)
	}
	if bias := sum/float64(ran) - (cfg0.Effects.Attribute - 1); math.Abs(bias) > 0.03 {
		t.Errorf("mean estimate off the planted effect by %+.3f", bias)
	}
}
