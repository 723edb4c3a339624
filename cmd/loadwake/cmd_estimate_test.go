package main

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// writeInventedPanel writes an invented panel (40 treated units in two
// cohorts, 60 controls, 24 months, +30% planted in "geometry", nothing in
// "deletion") with the panel export's column names.
func writeInventedPanel(t testing.TB) string {
	t.Helper()
	rng := rand.New(rand.NewPCG(5, 5))
	p := &panel.Panel{Start: time.Date(2032, 1, 1, 0, 0, 0, 0, time.UTC), Months: 24, Outcomes: []string{"geometry", "deletion"}}
	p.Y = make([][]float64, 2)
	for u := range 100 {
		g := -1
		switch {
		case u < 20:
			g = 8
		case u < 40:
			g = 12
		}
		p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("cell-%03d", u), FirstTreated: g, Weight: 1})
		level := 2 + 6*rng.Float64()
		for tm := range 24 {
			for o := range 2 {
				lam := level
				if o == 0 && g >= 0 && tm >= g {
					lam *= 1.3
				}
				// Poisson draw by inversion
				k, pr, cdf, x := 0.0, math.Exp(-lam), math.Exp(-lam), rng.Float64()
				for x > cdf {
					k++
					pr *= lam / k
					cdf += pr
				}
				p.Y[o] = append(p.Y[o], k)
			}
		}
	}
	var buf bytes.Buffer
	if err := panel.WriteCSV(&buf, p); err != nil {
		t.Fatal(err)
	}
	f := filepath.Join(t.TempDir(), "panel.csv")
	if err := os.WriteFile(f, buf.Bytes(), 0o644); err != nil {
		t.Fatal(err)
	}
	return f
}

func TestEstimateCommand(t *testing.T) {
	panel := writeInventedPanel(t)
	js := filepath.Join(t.TempDir(), "est.json")
	out, _, err := execRoot(t, "estimate", "--panel", panel, "--outcome", "geometry,deletion", "--cluster", "cluster",
		"--weight", "weight", "--window-before", "6", "--window-after", "10", "--draws", "199", "--json", js)
	if err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{"OUTCOME", "geometry", "cs-att", "ppml-twfe", "twfe-linear", "did-2x2", "40/60", "import guidelines"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	b, err := os.ReadFile(js)
	if err != nil {
		t.Fatal(err)
	}
	var es struct {
		Effects []map[string]any `json:"effects"`
		Events  []map[string]any `json:"event_study"`
		Cohorts []map[string]any `json:"by_cohort"`
	}
	if err := json.Unmarshal(b, &es); err != nil {
		t.Fatal(err)
	}
	if len(es.Effects) != 8 || len(es.Events) == 0 || len(es.Cohorts) != 4 {
		t.Fatalf("%d effects, %d event-study rows, %d cohort rows; want 8, some and 4", len(es.Effects), len(es.Events), len(es.Cohorts))
	}
	for _, k := range []string{"layer", "estimator", "att", "relative_effect", "ci95", "se", "p_value", "pre_trend_p", "treated_units", "control_units", "method", "note"} {
		if _, ok := es.Effects[0][k]; !ok {
			t.Errorf("effect row lacks %q", k)
		}
	}
	for _, e := range es.Effects {
		if e["layer"] == "geometry" && e["estimator"] == "cs-att" {
			if rel := e["relative_effect"].(float64); math.Abs(rel-0.3) > 0.1 {
				t.Errorf("geometry relative effect %v, planted 0.3", rel)
			}
		}
	}
}

func TestEstimateCommandErrors(t *testing.T) {
	panel := writeInventedPanel(t)
	bad := filepath.Join(t.TempDir(), "bad.csv")
	if err := os.WriteFile(bad, []byte("unit,month,first_treated,geometry\na,2030-01,,1\na,2030-02,,oops\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name  string
		args  []string
		usage bool
		want  string
	}{
		{"no panel", []string{"estimate", "--outcome", "geometry"}, true, "--panel"},
		{"no outcome, not an export", []string{"estimate", "--panel", bad}, true, "--outcome"},
		{"bad inference", []string{"estimate", "--panel", panel, "--outcome", "geometry", "--inference", "magic"}, true, "inference"},
		{"missing column", []string{"estimate", "--panel", panel, "--outcome", "trees"}, false, `column "trees"`},
		{"bad value", []string{"estimate", "--panel", bad, "--outcome", "geometry"}, false, `bad.csv:3: column "geometry": count "oops"`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, _, err := execRoot(t, c.args...)
			if err == nil || !strings.Contains(err.Error(), c.want) {
				t.Fatalf("error %v, want %q", err, c.want)
			}
			if got := errors.As(err, new(cli.UsageError)); got != c.usage {
				t.Errorf("usage error %v, want %v", got, c.usage)
			}
		})
	}
}

// TestEstimateReproducesAudit runs `loadwake audit --out` on a small invented
// world and then `loadwake estimate --panel` on the report folder's panel.csv
// with no other flags: every effect of report.json (each layer, key family and
// contributor group, each estimator) comes back with the same ATT, interval
// and p-value, so a reader can reproduce the report from the CSV alone. The
// check is against the audit's own figures (the estimators themselves are
// checked against R in audit/did).
func TestEstimateReproducesAudit(t *testing.T) {
	if testing.Short() {
		t.Skip("builds and audits a simulated world")
	}
	store, world, truth := simulatedStore(t)
	out := filepath.Join(t.TempDir(), "review")
	if msg, err := execRootOut(t, "--store", store, "audit", "--units", filepath.Join(world, "districts.geojson"),
		"--account", truth.ImportAccounts[0].User, "--out", out); err != nil {
		t.Fatalf("audit: %v\n%s", err, msg)
	}
	var rep struct {
		Effects []did.Effect `json:"effects"`
	}
	readJSON(t, filepath.Join(out, "report.json"), &rep)
	if len(rep.Effects) == 0 {
		t.Fatal("report.json has no effects")
	}
	got := filepath.Join(t.TempDir(), "estimates.json")
	if msg, err := execRootOut(t, "estimate", "--panel", filepath.Join(out, "panel.csv"), "--json", got); err != nil {
		t.Fatalf("estimate: %v\n%s", err, msg)
	}
	var es did.Estimates
	readJSON(t, got, &es)
	type key struct{ layer, est string }
	byKey := map[key]int{}
	for i, e := range es.Effects {
		byKey[key{e.Layer, e.Estimator}] = i
	}
	near := func(a, b float64) bool { return math.Abs(a-b) <= 1e-9*math.Max(1, math.Abs(a)) }
	for _, w := range rep.Effects {
		i, ok := byKey[key{w.Layer, w.Estimator}]
		if !ok {
			t.Errorf("%s %s: in report.json, not in the estimates from panel.csv", w.Layer, w.Estimator)
			continue
		}
		g := es.Effects[i]
		if !near(g.ATT, w.ATT) || !near(g.CI95[0], w.CI95[0]) || !near(g.CI95[1], w.CI95[1]) || !near(g.PValue, w.PValue) {
			t.Errorf("%s %s: from panel.csv att %.10g %v p %.6g, report.json att %.10g %v p %.6g",
				w.Layer, w.Estimator, g.ATT, g.CI95, g.PValue, w.ATT, w.CI95, w.PValue)
		}
	}
}

func readJSON(t testing.TB, path string, v any) {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, v); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
}
