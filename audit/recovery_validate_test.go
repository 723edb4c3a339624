//go:build validate

package audit_test

import (
	"context"
	"fmt"
	"math"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/internal/reftest"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
)

// The whole-pipeline simulation studies (go test -tags validate): invented
// worlds of audit/sim, ingested, classified, detected, matched and audited.

// TestAuditCoverage runs the whole pipeline on 200 small seeded worlds (8 of
// 36 districts treated in 2 waves) with the default inference, and counts how
// often the ppml-twfe 95% interval of the attribute layer covers the planted
// effect.
//
// Before the headline used the score bootstrap with the null imposed, this
// design measured 82% (164 of 200 worlds, unrestricted wild score
// bootstrap). The target is 93% to 97%; the test fails when the Wilson 95%
// interval of the coverage misses that band, or on bias beyond 0.03.
func TestAuditCoverage(t *testing.T) {
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
	lo, hi := reftest.Wilson(covered, ran)
	t.Logf("coverage of the planted attribute effect %+.2f: %d of %d worlds (%.1f%%, Wilson 95%% [%.1f, %.1f]); mean estimate %+.3f",
		cfg0.Effects.Attribute-1, covered, ran, 100*float64(covered)/float64(ran), 100*lo, 100*hi, sum/float64(ran))
	if ran < worlds*9/10 || hi < 0.93 || lo > 0.97 {
		t.Errorf("coverage %d of %d worlds, want 93%% to 97%%", covered, ran)
	}
	if bias := sum/float64(ran) - (cfg0.Effects.Attribute - 1); math.Abs(bias) > 0.03 {
		t.Errorf("mean estimate off the planted effect by %+.3f", bias)
	}
}

// TestAuditNullWarnings audits 200 small null worlds (every planted
// multiplier 1, parallel trends, 8 of 36 districts treated in 2 waves) and
// counts the audits with any warning (target at most 10%) and, per layer, the
// audits where the headline rejects at 5% or a warning names the layer
// (target at most 6%), each with its Wilson 95% interval.
func TestAuditNullWarnings(t *testing.T) {
	const worlds = 200
	layerNames := []string{"geometry", "attribute", "new_feature", "deletion"}
	anyWarn, ran := 0, 0
	fp := map[string]int{}
	var examples []string
	for seed := 1; seed <= worlds; seed++ {
		cfg := sim.DefaultConfig()
		cfg.Seed = uint64(5000 + seed)
		cfg.Cols, cfg.Rows, cfg.Months = 6, 6, 30
		cfg.Treated, cfg.Waves = 8, 2
		cfg.ImportAccounts = 1
		cfg.Scale = 0.5
		cfg.Effects = sim.Effects{Geometry: 1, Attribute: 1, NewFeature: 1, Deletion: 1}
		var rep *audit.Report
		ok := t.Run(fmt.Sprint("seed", cfg.Seed), func(t *testing.T) {
			w := worldtest.Build(t, cfg)
			eo := did.DefaultOptions()
			eo.Draws = 199
			eo.Window = did.Window{Pre: 6, Post: 12}
			var err error
			rep, err = audit.Run(context.Background(), w.Store, &w.Episodes[0], w.Episodes, w.Units, audit.Options{Estimate: eo})
			if err != nil {
				t.Fatal(err)
			}
		})
		if !ok {
			continue
		}
		ran++
		if len(rep.Warnings) > 0 {
			anyWarn++
			if len(examples) < 5 {
				examples = append(examples, rep.Warnings[0])
			}
		}
		for _, l := range layerNames {
			hit := false
			for _, e := range rep.Effects {
				if e.Layer == l && e.Estimator == did.Headline && e.PValue < 0.05 {
					hit = true
				}
			}
			for _, msg := range rep.Warnings {
				if strings.HasPrefix(msg, l+":") {
					hit = true
				}
			}
			if hit {
				fp[l]++
			}
		}
	}
	lo, hi := reftest.Wilson(anyWarn, ran)
	t.Logf("null worlds: %d of %d audits with any warning (%.1f%%, Wilson 95%% [%.1f, %.1f]); first warnings: %q",
		anyWarn, ran, 100*float64(anyWarn)/float64(ran), 100*lo, 100*hi, examples)
	// Target: at most 10% of null audits warn. Measured on this design: 74 of
	// 200 (37.0%, Wilson 95% [30.6, 43.9]), the target is NOT met (the
	// robustness sign checks and the pre-import growth test fire on finer
	// outcomes and on attribute; see the closing note of the verdict work).
	// Until it is, the test guards the measured level against regressions:
	// it fails when the rate's interval lies wholly above 45%, and logs the
	// shortfall against the target.
	if lo > 0.10 {
		t.Logf("target missed: %d of %d null audits warn, target at most 10%%", anyWarn, ran)
	}
	if ran < worlds*9/10 || lo > 0.45 {
		t.Errorf("%d of %d null audits warn, more than the measured 37%% (target 10%%)", anyWarn, ran)
	}
	for _, l := range layerNames {
		lo, hi := reftest.Wilson(fp[l], ran)
		t.Logf("null worlds, %s: false positives (headline p < 0.05 or a warning) %d of %d (%.1f%%, Wilson 95%% [%.1f, %.1f])",
			l, fp[l], ran, 100*float64(fp[l])/float64(ran), 100*lo, 100*hi)
		// Target at most 6% per layer; measured 9.0% geometry, 29.0%
		// attribute, 13.0% new_feature, 14.5% deletion (200 worlds): NOT
		// met. The guard fails when a layer's interval lies wholly above
		// 35%, above every measured layer, and logs the shortfall.
		if lo > 0.06 {
			t.Logf("target missed: %s false positives in %d of %d null audits, target at most 6%%", l, fp[l], ran)
		}
		if lo > 0.35 {
			t.Errorf("%s: false positives in %d of %d null audits, more than measured (target 6%%)", l, fp[l], ran)
		}
	}
}
