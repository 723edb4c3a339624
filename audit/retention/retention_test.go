package retention_test

import (
	"context"
	"encoding/json"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/retention"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/study"
)

// retentionWorld is a small invented world with the Retention plan: 6 of 25
// districts treated in one wave at month 7 of 30.
func retentionWorld(seed uint64, hr float64) sim.Config {
	cfg := sim.DefaultConfig()
	cfg.Seed = seed
	cfg.Cols, cfg.Rows, cfg.Months = 5, 5, 30
	cfg.Treated, cfg.Waves = 6, 1
	cfg.ImportAccounts = 1
	cfg.Scale = 0.1
	cfg.ImportBuildings, cfg.ImportPOIs = 600, 60
	r := sim.DefaultRetention()
	r.PerDistrictMonth = 10
	r.EditsPerMonth = 1 // one edit a month while editing: a light world
	r.HazardRatio = hr
	cfg.Retention = &r
	return cfg
}

// runWorld builds the world's study and its retention section.
func runWorld(tb testing.TB, cfg sim.Config, draws int) (*worldtest.World, *retention.Sample, *retention.Result) {
	tb.Helper()
	ctx := context.Background()
	w := worldtest.Build(tb, cfg)
	st, err := study.ForEpisode(ctx, w.Store, w.Named(tb), w.Episodes, w.Units, study.Options{Before: 12, After: 24})
	if err != nil {
		tb.Fatal(err)
	}
	opts := retention.Options{Before: 12, After: 24, Draws: draws}
	s, err := retention.Scan(ctx, w.Store, st, w.Units, opts)
	if err != nil {
		tb.Fatal(err)
	}
	r, err := retention.Estimate(ctx, s, opts)
	if err != nil {
		tb.Fatal(err)
	}
	return w, s, r
}

// TestPlantedRetention checks the whole path on one invented world: the
// estimate of the planted 12-month difference (sim.Retention.PlantedDiD, the
// simulator's planted truth) lies in its bootstrap interval, the groups are
// all filled, and the section names no account.
func TestPlantedRetention(t *testing.T) {
	cfg := retentionWorld(3, 1.6)
	w, s, r := runWorld(t, cfg, 399)
	want := cfg.Retention.PlantedDiD(12)
	e := r.Retention12
	t.Logf("planted %+.3f, estimate %+.3f [%+.3f, %+.3f]; HR %.2f [%.2f, %.2f]; %d newcomers",
		want, e.Estimate, e.CI95[0], e.CI95[1], r.HazardRatio.Estimate, r.HazardRatio.CI95[0], r.HazardRatio.CI95[1], len(s.Newcomers))
	if !e.Computed || e.NoInterval {
		t.Fatalf("12-month difference not computed with an interval: %+v (notes %v)", e, r.Notes)
	}
	if want < e.CI95[0] || want > e.CI95[1] {
		t.Errorf("planted %+.3f outside the interval [%+.3f, %+.3f]", want, e.CI95[0], e.CI95[1])
	}
	if !r.HazardRatio.Computed || r.HazardRatio.Estimate <= 1 {
		t.Errorf("hazard ratio %+v, want above 1 (planted monthly stop probability ×%.1f)", r.HazardRatio, cfg.Retention.HazardRatio)
	}
	for _, g := range r.Groups {
		if g.Newcomers == 0 || g.Retention[2].Followed == 0 {
			t.Errorf("group %s %s: %d newcomers, %d followed a year", g.Areas, g.Period, g.Newcomers, g.Retention[2].Followed)
		}
	}
	b, err := json.Marshal(r)
	if err != nil {
		t.Fatal(err)
	}
	for _, a := range w.Truth.ImportAccounts {
		if strings.Contains(string(b), a.User) {
			t.Errorf("the retention section names account %s", a.User)
		}
	}
	for _, k := range []string{"uid", "user", "account_id"} {
		if strings.Contains(string(b), `"`+k+`"`) {
			t.Errorf("the retention section has a field %q", k)
		}
	}
}
