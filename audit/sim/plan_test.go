package sim_test

import (
	"errors"
	"slices"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
)

// TestAssignment checks that a given assignment loads exactly the assigned
// districts in the assigned months, and that the world's history before the
// first assigned month is the one the same seed gives without an import.
func TestAssignment(t *testing.T) {
	base := smallConfig()
	base.Treated, base.Waves, base.Months = 0, 0, 10
	_, without := generate(t, base)

	cfg := base
	cfg.Months = 14
	cfg = cfg.WithAssignment(map[int]string{3: "2019-11", 17: "2019-11", 8: "2020-01", 1: "2020-02"})
	_, tr := generate(t, cfg)

	want := []sim.Cohort{
		{Wave: 1, Start: "2019-11", StartIndex: 10, Districts: []int{3, 17}},
		{Wave: 2, Start: "2020-01", StartIndex: 12, Districts: []int{8}},
		{Wave: 3, Start: "2020-02", StartIndex: 13, Districts: []int{1}},
	}
	if len(tr.Cohorts) != len(want) {
		t.Fatalf("cohorts %+v, want %+v", tr.Cohorts, want)
	}
	for i, c := range tr.Cohorts {
		if c.Wave != want[i].Wave || c.Start != want[i].Start || c.StartIndex != want[i].StartIndex || !slices.Equal(c.Districts, want[i].Districts) {
			t.Errorf("cohort %d: %+v, want %+v", i+1, c, want[i])
		}
	}
	loaded := map[int]string{}
	for _, a := range tr.ImportAccounts {
		for _, d := range a.Districts {
			loaded[d] = tr.Districts[d-1].Start
		}
	}
	if len(loaded) != 4 || loaded[3] != "2019-11" || loaded[17] != "2019-11" || loaded[8] != "2020-01" || loaded[1] != "2020-02" {
		t.Errorf("import accounts loaded %v, want the assignment", loaded)
	}
	if tr.Tallies.ImportVersions == 0 {
		t.Error("no import versions written")
	}
	// Same seed: the organic history of the months before the import is
	// the import-free world's, event for event.
	for _, layer := range []string{"geometry", "attribute", "new_feature", "deletion", "bookkeeping"} {
		a, b := without.Tallies.Monthly.Layer(layer), tr.Tallies.Monthly.Layer(layer)
		for d := range a {
			if !slices.Equal(a[d][:10], b[d][:10]) {
				t.Fatalf("%s, district %d: months before the import differ: %v vs %v", layer, d+1, a[d][:10], b[d][:10])
			}
		}
	}
}

func TestAssignmentValidate(t *testing.T) {
	base := smallConfig() // 5×4 districts, 14 months from 2019-01
	for _, tc := range []struct {
		name string
		cfg  sim.Config
	}{
		{"empty", base.WithAssignment(map[int]string{})},
		{"district 0", base.WithAssignment(map[int]string{0: "2019-06"})},
		{"district off the grid", base.WithAssignment(map[int]string{21: "2019-06"})},
		{"bad month", base.WithAssignment(map[int]string{2: "2019-6x"})},
		{"first month", base.WithAssignment(map[int]string{2: "2019-01"})},
		{"before the start", base.WithAssignment(map[int]string{2: "2018-12"})},
		{"after the end", base.WithAssignment(map[int]string{2: "2020-03"})},
		{"treated not set", func() sim.Config {
			c := base.WithAssignment(map[int]string{2: "2019-06", 4: "2019-08"})
			c.Treated = 3
			return c
		}()},
		{"waves not set", func() sim.Config { c := base; c.Assignment = map[int]string{2: "2019-06"}; return c }()},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.cfg.Validate(); !errors.Is(err, sim.ErrConfig) {
				t.Errorf("Validate: %v, want ErrConfig", err)
			}
		})
	}
	if err := base.WithAssignment(map[int]string{2: "2019-02", 20: "2020-02"}).Validate(); err != nil {
		t.Errorf("valid assignment refused: %v", err)
	}
}
