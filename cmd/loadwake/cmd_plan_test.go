package main

import (
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/paulmach/orb"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/planrun"
)

// TestPlanCommand plans the simulator's invented proposal over nine
// districts of a small invented world and checks the files, the
// reproducibility of the seed and the summary.
func TestPlanCommand(t *testing.T) {
	if testing.Short() {
		t.Skip("simulated world: skipped with -short")
	}
	store, world, _ := simulatedStore(t)
	districts := filepath.Join(world, sim.DistrictsFile)
	units, err := spatial.Parse(districts, spatial.Options{})
	if err != nil {
		t.Fatal(err)
	}
	var areas []orb.Bound
	for i := range 9 {
		areas = append(areas, units.Bound(i))
	}
	data, err := sim.Proposal(areas, 5)
	if err != nil {
		t.Fatal(err)
	}
	tmp := t.TempDir()
	prop := filepath.Join(tmp, "proposal.geojson")
	if err := os.WriteFile(prop, data, 0o644); err != nil {
		t.Fatal(err)
	}
	run := func(dir string) string {
		t.Helper()
		out, err := execRootOut(t, "--store", store, "plan", prop, "--units", districts, "--waves", "3", "--months-between", "2",
			"--history", "12", "--window-before", "6", "--seed", "11", "--no-power", "--out", dir)
		if err != nil {
			t.Fatalf("plan: %v\n%s", err, out)
		}
		return out
	}
	a, b := filepath.Join(tmp, "a"), filepath.Join(tmp, "b")
	out := run(a)
	run(b)
	for _, name := range []string{"plan.json", "plan.csv", "plan.geojson", "preregistration.md", "preregistration.wiki",
		"waves/wave-1.osc", "waves/wave-2.osc", "waves/wave-3.osc"} {
		if fi, err := os.Stat(filepath.Join(a, name)); err != nil || fi.Size() == 0 {
			t.Errorf("%s: %v", name, err)
		}
	}
	ca, _ := os.ReadFile(filepath.Join(a, "plan.csv"))
	cb, _ := os.ReadFile(filepath.Join(b, "plan.csv"))
	if string(ca) != string(cb) || strings.Count(string(ca), "\n") != 10 {
		t.Errorf("seed 11 twice gave different plans or not 9 units:\n%s\n%s", ca, cb)
	}
	for _, want := range []string{"9 units", "wave 3", "comparison until the evaluation", "look 1", "community"} {
		if !strings.Contains(out, want) {
			t.Errorf("summary lacks %q:\n%s", want, out)
		}
	}

	// A plan dated inside the world's history, evaluated by audit --plan:
	// nothing was loaded by it, so every treated unit is a deviation, and
	// the randomization test runs on the plan's own units.
	t.Run("audit --plan", func(t *testing.T) {
		back := filepath.Join(tmp, "back")
		if out, err := execRootOut(t, "--store", store, "plan", prop, "--units", districts, "--waves", "3", "--months-between", "2",
			"--history", "6", "--window-before", "4", "--start", "2019-08", "--seed", "3", "--no-power", "--out", back); err != nil {
			t.Fatalf("plan: %v\n%s", err, out)
		}
		eval := filepath.Join(tmp, "eval")
		out, err := execRootOut(t, "--store", store, "audit", "--plan", filepath.Join(back, "plan.json"), "--plan-draws", "19", "--draws", "99", "--out", eval)
		if err != nil {
			t.Fatalf("audit --plan: %v\n%s", err, out)
		}
		if !strings.Contains(out, "randomization p =") || strings.Count(out, "plan deviation:") != 6 {
			t.Errorf("audit --plan output lacks the randomization test or the 6 unloaded treated units:\n%s", out)
		}
		var ev struct {
			Randomization struct {
				P     float64 `json:"p_value"`
				Units int     `json:"units"`
			} `json:"randomization"`
			Deviations []struct {
				Kind string `json:"kind"`
			} `json:"deviations"`
		}
		b, err := os.ReadFile(filepath.Join(eval, planrun.EvalFile))
		if err != nil || json.Unmarshal(b, &ev) != nil {
			t.Fatalf("%s: %v", planrun.EvalFile, err)
		}
		if ev.Randomization.Units < 3 || ev.Randomization.Units > 9 || ev.Randomization.P <= 0 || ev.Randomization.P > 1 || len(ev.Deviations) != 6 {
			t.Errorf("plan evaluation: %+v", ev)
		}
		if _, err := execRootOut(t, "--store", store, "audit", "--plan", filepath.Join(back, "plan.json"), "--import", "imp-1"); !errors.As(err, new(cli.UsageError)) {
			t.Errorf("--plan with --import: %v, want a usage error", err)
		}
	})
}

func TestPlanBadFlags(t *testing.T) {
	for _, tc := range []struct {
		name string
		args []string
	}{
		{"no units", []string{"plan", "p.geojson"}},
		{"one wave", []string{"plan", "p.geojson", "--units", "tiles:14", "--waves", "1"}},
		{"bad start", []string{"plan", "p.geojson", "--units", "tiles:14", "--start", "2024-13"}},
		{"pause 0", []string{"plan", "p.geojson", "--units", "tiles:14", "--pause", "0"}},
		{"few draws", []string{"plan", "p.geojson", "--units", "tiles:14", "--draws", "10"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := execRootOut(t, tc.args...)
			if !errors.As(err, new(cli.UsageError)) {
				t.Errorf("error %v, want a usage error", err)
			}
		})
	}
}
