package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geojson"

	"github.com/loadwake/loadwake/audit/rollout"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/planrun"
)

// planRehearsal is the size of a plan rehearsal: an invented world of
// cols×rows districts and months of history, a plan over all its districts,
// and a second world of the same seed whose import follows the plan with
// attribute edits planted at ×effect.
type planRehearsal struct {
	cols, rows, months, waves, between, history, before int
	activity, effect                                    float64
	seed                                                uint64
}

// rehearsalResult is what the rehearsal's audit --plan gave.
type rehearsalResult struct {
	plan     *rollout.Plan
	truth    *sim.Truth
	relative float64    // the headline's relative effect on attribute edits
	ci       [2]float64 // its 95% interval
	method   string
	treated  int
	cohorts  map[string]int // by_cohort units per wave month (cs-att, attribute)
	eval     planrun.Evaluation
	out      string
}

// run simulates the first world, plans over its districts, simulates the
// rehearsal world with --plan, ingests and classifies it and evaluates it
// with audit --plan, all through the command line.
func (r planRehearsal) run(t testing.TB) rehearsalResult {
	t.Helper()
	tmp := t.TempDir()
	must := func(args ...string) string {
		t.Helper()
		out, err := execRootOut(t, args...)
		if err != nil {
			t.Fatalf("%v: %v\n%s", args, err, out)
		}
		return out
	}
	world := func(name string, extra ...string) string {
		dir := filepath.Join(tmp, name)
		args := []string{"simulate", "--out", dir, "--cols", strconv.Itoa(r.cols), "--rows", strconv.Itoa(r.rows),
			"--seed", fmt.Sprint(r.seed), "--activity", fmt.Sprint(r.activity)}
		must(append(args, extra...)...)
		store := filepath.Join(tmp, name+".db")
		must("--store", store, "ingest", filepath.Join(dir, sim.HistoryFile), filepath.Join(dir, sim.ChangesetsFile))
		must("--store", store, "classify")
		return dir
	}
	w1 := world("history", "--months", strconv.Itoa(r.months), "--treated", "0")
	districts := filepath.Join(w1, sim.DistrictsFile)
	units, err := spatial.Parse(districts, spatial.Options{})
	if err != nil {
		t.Fatal(err)
	}
	var areas []orb.Bound
	for i := range r.cols * r.rows {
		areas = append(areas, units.Bound(i))
	}
	data, err := sim.Proposal(areas, r.seed)
	if err != nil {
		t.Fatal(err)
	}
	prop := filepath.Join(tmp, "proposal.geojson")
	if err := os.WriteFile(prop, data, 0o644); err != nil {
		t.Fatal(err)
	}
	planDir := filepath.Join(tmp, "plan")
	must("--store", filepath.Join(tmp, "history.db"), "plan", prop, "--units", districts, "--waves", strconv.Itoa(r.waves),
		"--months-between", strconv.Itoa(r.between), "--history", strconv.Itoa(r.history), "--window-before", strconv.Itoa(r.before),
		"--seed", fmt.Sprint(r.seed), "--no-power", "--out", planDir)
	planFile := filepath.Join(planDir, "plan.json")
	pl, err := rollout.ReadPlan(planFile)
	if err != nil {
		t.Fatal(err)
	}

	w2 := world("rehearsal", "--plan", planFile, "--effect-attribute", fmt.Sprint(r.effect),
		"--effect-geometry", "1", "--effect-new-feature", "1", "--effect-deletion", "1")
	var tr sim.Truth
	readJSON(t, filepath.Join(w2, sim.TruthFile), &tr)
	eval, auditJSON := filepath.Join(tmp, "eval"), filepath.Join(tmp, "audit.json")
	out := must("--store", filepath.Join(tmp, "rehearsal.db"), "audit", "--plan", planFile, "--plan-draws", "99", "--draws", "99",
		"--json", auditJSON, "--out", eval)

	res := rehearsalResult{plan: pl, truth: &tr, out: out, cohorts: map[string]int{}}
	var rep struct {
		Units struct {
			Treated int `json:"treated"`
		} `json:"units"`
		Effects []struct {
			Layer     string     `json:"layer"`
			Estimator string     `json:"estimator"`
			Relative  *float64   `json:"relative_effect"`
			CI        [2]float64 `json:"ci95"`
			Method    string     `json:"method"`
		} `json:"effects"`
		ByCohort []struct {
			Layer     string `json:"layer"`
			Estimator string `json:"estimator"`
			Cohort    string `json:"cohort"`
			Units     int    `json:"units"`
		} `json:"by_cohort"`
	}
	readJSON(t, auditJSON, &rep)
	res.treated = rep.Units.Treated
	found := false
	for _, e := range rep.Effects {
		if e.Layer == "attribute" && e.Estimator == "ppml-twfe" && e.Relative != nil {
			res.relative, res.ci, res.method, found = *e.Relative, e.CI, e.Method, true
		}
	}
	if !found {
		t.Fatalf("audit JSON has no headline (ppml-twfe) relative effect on attribute:\n%s", out)
	}
	for _, c := range rep.ByCohort {
		if c.Layer == "attribute" && c.Estimator == "cs-att" {
			res.cohorts[c.Cohort] = c.Units
		}
	}
	readJSON(t, filepath.Join(eval, planrun.EvalFile), &res.eval)
	return res
}

// check holds the rehearsal to the plan and to the simulator's planted
// truth: the world loaded exactly the plan's treated waves in their months,
// audit --plan flags no deviation, its treated units and cohorts are the
// plan's, the randomization test is reported, and the headline's interval
// holds the planted effect (truth.json: attribute ×effect).
func (res rehearsalResult) check(t testing.TB, effect float64) {
	t.Helper()
	pl, tr := res.plan, res.truth
	want := map[string][]int{} // month → districts of the plan's treated waves
	treated := 0
	for _, u := range pl.Units {
		id, err := strconv.Atoi(u.ID)
		if err != nil {
			t.Fatalf("plan unit %q is not a district id", u.ID)
		}
		if u.Wave < pl.Waves {
			want[u.Start] = append(want[u.Start], id)
			treated++
		}
	}
	got := map[string][]int{}
	for _, c := range tr.Cohorts {
		if c.Start < pl.Evaluation {
			got[c.Start] = c.Districts
		}
	}
	for m, ids := range want {
		slices.Sort(ids)
		if !slices.Equal(got[m], ids) {
			t.Errorf("month %s: the world loaded districts %v, the plan's waves %v", m, got[m], ids)
		}
		if res.cohorts[m] != len(ids) {
			t.Errorf("audit cohort %s has %d units, the plan %d", m, res.cohorts[m], len(ids))
		}
	}
	if len(got) != len(want) {
		t.Errorf("the world's imports before the evaluation start in %d months, the plan's treated waves in %d", len(got), len(want))
	}
	if tr.Effects.Attribute != effect {
		t.Errorf("truth.json plants attribute ×%v, want ×%v", tr.Effects.Attribute, effect)
	}
	if res.treated != treated {
		t.Errorf("audit treated %d units, the plan's treated waves hold %d", res.treated, treated)
	}
	if len(res.eval.Deviations) != 0 {
		t.Errorf("deviations flagged on a world loaded as planned: %+v", res.eval.Deviations)
	}
	if len(res.eval.Imports) == 0 {
		t.Errorf("audit --plan found none of the rehearsal's imports:\n%s", res.out)
	}
	ri := res.eval.Randomization
	if ri == nil || ri.Draws != 99 || !(ri.P > 0 && ri.P <= 1) {
		t.Errorf("randomization test not reported: %+v", ri)
	}
	// The planted truth (the simulator's truth.json): attribute edits ×effect
	// after the import, a relative effect of effect-1.
	if planted := effect - 1; !(res.ci[0] <= planted && planted <= res.ci[1]) {
		t.Errorf("headline %+.3f [%+.3f, %+.3f] misses the planted %+.3f", res.relative, res.ci[0], res.ci[1], planted)
	}
}

// TestSimulatePlanRehearsal plans a tiny invented world's districts,
// simulates a world loaded by the plan's waves with a planted effect and
// evaluates it with audit --plan.
func TestSimulatePlanRehearsal(t *testing.T) {
	if testing.Short() {
		t.Skip("simulated worlds: skipped with -short")
	}
	r := planRehearsal{cols: 4, rows: 4, months: 12, waves: 3, between: 3, history: 12, before: 6, activity: 60, effect: 0.7, seed: 3}
	res := r.run(t)
	res.check(t, r.effect)
	t.Logf("headline attribute %+.3f [%+.3f, %+.3f] vs planted %+.3f (%s); randomization p = %.3f over %d draws, %d units",
		res.relative, res.ci[0], res.ci[1], r.effect-1, res.method, res.eval.Randomization.P, res.eval.Randomization.Draws, res.eval.Randomization.Units)
}

// writeTinyPlan writes plan.json (and, with places, plan.geojson with the
// units' shapes shifted by shift degrees east) for a 2×2 world from 2019-01:
// districts 1 and 4 treated in 2019-04, 2 and 3 held back to 2019-07.
func writeTinyPlan(t testing.TB, dir string, ids []string, places bool, shift float64) string {
	t.Helper()
	pl := rollout.Plan{Schema: rollout.Schema, Procedure: rollout.Procedure, Proposal: "invented", Waves: 2,
		Start: "2019-04", Evaluation: "2019-07"}
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows = 2, 2
	fc := geojson.NewFeatureCollection()
	for i, id := range ids {
		u := rollout.Unit{ID: id, Wave: 1, Start: "2019-04"}
		if i == 1 || i == 2 {
			u.Wave, u.Start = 2, "2019-07"
		}
		pl.Units = append(pl.Units, u)
		n, _ := strconv.Atoi(id)
		b := cfg.DistrictBound(max(n, 1))
		b.Min[0] += shift
		b.Max[0] += shift
		f := geojson.NewFeature(b.ToPolygon())
		f.Properties["id"] = id
		fc.Append(f)
	}
	path := filepath.Join(dir, "plan.json")
	b, _ := json.Marshal(pl)
	if err := os.WriteFile(path, b, 0o644); err != nil {
		t.Fatal(err)
	}
	if places {
		b, _ := json.Marshal(fc)
		if err := os.WriteFile(filepath.Join(dir, "plan.geojson"), b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return path
}

func TestSimulatePlanFlags(t *testing.T) {
	good := []string{"1", "2", "3", "4"}
	tiny := []string{"--cols", "2", "--rows", "2", "--activity", "5"}
	for _, tc := range []struct {
		name   string
		ids    []string
		places bool
		shift  float64
		extra  []string
		usage  bool // a usage error; else success
		want   string
	}{
		{"as planned", good, true, 0, nil, false, "cohort 1    starts 2019-04, 2 districts"},
		{"held-back wave after the end", good, true, 0, []string{"--months", "5"}, false, "wave 2 (2 units) starts after the world's last month"},
		{"without plan.geojson", good, false, 0, nil, false, "places are not checked"},
		{"with --treated", good, true, 0, []string{"--treated", "2"}, true, ""},
		{"tile units", []string{"17/1/2", "2", "3", "4"}, false, 0, nil, true, ""},
		{"off the grid", []string{"1", "2", "3", "9"}, false, 0, nil, true, ""},
		{"another grid's places", good, true, 0.01, nil, true, ""},
		{"start before the world", good, true, 0, []string{"--start", "2019-05"}, true, ""},
	} {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			path := writeTinyPlan(t, dir, tc.ids, tc.places, tc.shift)
			args := append([]string{"simulate", "--out", filepath.Join(dir, "w"), "--plan", path}, tiny...)
			out, err := execRootOut(t, append(args, tc.extra...)...)
			switch {
			case tc.usage && !errors.As(err, new(cli.UsageError)):
				t.Errorf("error %v, want a usage error", err)
			case !tc.usage && err != nil:
				t.Errorf("error %v\n%s", err, out)
			case !tc.usage && !strings.Contains(out, tc.want):
				t.Errorf("output lacks %q:\n%s", tc.want, out)
			}
		})
	}
	if _, err := execRootOut(t, append([]string{"simulate", "--out", t.TempDir(), "--plan", filepath.Join(t.TempDir(), "none.json")}, tiny...)...); err == nil {
		t.Error("a missing plan file was accepted")
	}
}
