package did

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/panel/paneltest"
	"gonum.org/v1/gonum/stat/distuv"
)

func effectOf(tb testing.TB, es *Estimates, layer, est string) Effect {
	tb.Helper()
	for _, e := range es.Effects {
		if e.Layer == layer && e.Estimator == est {
			return e
		}
	}
	tb.Fatalf("no %s row for %s; warnings: %v", est, layer, es.Warnings)
	return Effect{}
}

// TestEstimateRecoversPlantedEffect: a +25% effect planted in an invented
// world is recovered within 0.05 by cs-att and ppml-twfe, inside their 95%
// intervals; the null world shows no effect.
func TestEstimateRecoversPlantedEffect(t *testing.T) {
	for _, c := range []struct {
		name  string
		delta float64
	}{{"planted +25%", 0.25}, {"null", 0}} {
		t.Run(c.name, func(t *testing.T) {
			w := paneltest.World{PerCohort: 100, Cohorts: []int{12, 18, 24}, Controls: 300, Months: 40, Delta: c.delta}
			es, err := Estimate(context.Background(), w.Panel(1), DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			for _, est := range []string{EstimatorCS, EstimatorPPML, EstimatorTWFELinear, EstimatorDiD2x2} {
				e := effectOf(t, es, "layer0", est)
				if e.RelativeEffect == nil {
					t.Fatalf("%s: no relative effect: %s", est, e.Note)
				}
				rel := *e.RelativeEffect
				if math.Abs(rel-c.delta) > 0.05 {
					t.Errorf("%s: relative effect %.4f, planted %.2f", est, rel, c.delta)
				}
				if c.delta > 0 && (est == EstimatorCS || est == EstimatorPPML) && (e.CI95[0] > c.delta || e.CI95[1] < c.delta) {
					t.Errorf("%s: 95%% interval %v misses planted %.2f", est, e.CI95, c.delta)
				}
				if e.TreatedUnits != 300 || e.ControlUnits != 300 {
					t.Errorf("%s: %d treated, %d controls; want 300 and 300", est, e.TreatedUnits, e.ControlUnits)
				}
			}
			if _, err := json.Marshal(es); err != nil {
				t.Fatal(err)
			}
		})
	}
}

// TestEstimateFlagsPreTrends: treated areas drifting upward before treatment
// must fail the pre-trend tests and raise a warning.
func TestEstimateFlagsPreTrends(t *testing.T) {
	w := paneltest.World{PerCohort: 100, Cohorts: []int{14, 20}, Controls: 200, Months: 36, Delta: 0, Trend: 0.06}
	es, err := Estimate(context.Background(), w.Panel(2), DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	for _, est := range []string{EstimatorCS, EstimatorTWFELinear, EstimatorPPML} {
		e := effectOf(t, es, "layer0", est)
		if e.PreTrendP == nil || *e.PreTrendP >= 0.05 {
			t.Errorf("%s: pre-trend p %v, want < 0.05", est, e.PreTrendP)
		}
	}
	if !strings.Contains(strings.Join(es.Warnings, "\n"), "layer0: before the import, import areas and comparison areas moved apart") {
		t.Errorf("no pre-trend warning in %v", es.Warnings)
	}
	if len(es.Placebo) != 1 || es.Placebo[0].PValue >= 0.05 {
		t.Errorf("placebo %+v should show the drift", es.Placebo)
	}
}

// TestEstimateWarningFamily: with Options.Family, only the family's
// outcomes raise warnings; the same drift in an outcome outside it is a note.
func TestEstimateWarningFamily(t *testing.T) {
	w := paneltest.World{PerCohort: 100, Cohorts: []int{14, 20}, Controls: 200, Months: 36, Trend: 0.06, Outcomes: 2}
	p := w.Panel(2)
	for _, tc := range []struct {
		name       string
		family     []string
		warn, note []string
	}{
		{name: "every outcome", warn: []string{"layer0", "layer1"}},
		{name: "layer1 only", family: []string{"layer1"}, warn: []string{"layer1"}, note: []string{"layer0"}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			opts := DefaultOptions()
			opts.Draws = 99
			opts.Family = tc.family
			es, err := Estimate(context.Background(), p, opts)
			if err != nil {
				t.Fatal(err)
			}
			count := func(list []string, outcome string) int {
				n := 0
				for _, m := range list {
					if strings.HasPrefix(m, outcome+": before the import, import areas and comparison areas moved apart") {
						n++
					}
				}
				return n
			}
			for _, o := range []string{"layer0", "layer1"} {
				wantW, wantN := slices.Contains(tc.warn, o), slices.Contains(tc.note, o)
				if got := count(es.Warnings, o) == 1; got != wantW {
					t.Errorf("%s: pre-trend warning %v, want %v: %q", o, got, wantW, es.Warnings)
				}
				if got := count(es.Notes, o) == 1; got != wantN {
					t.Errorf("%s: pre-trend note %v, want %v: %q", o, got, wantN, es.Notes)
				}
			}
		})
	}
}

// TestEstimateCoverage runs 200 seeded small worlds with a planted +20%
// effect; the 95% intervals of cs-att and ppml-twfe must cover the truth in
// 92% to 98% of them.
func TestEstimateCoverage(t *testing.T) {
	const worlds = 200
	w := paneltest.World{PerCohort: 25, Cohorts: []int{6, 9}, Controls: 60, Months: 16, Delta: 0.2}
	opts := DefaultOptions()
	opts.Window = Window{Pre: 4, Post: 6}
	opts.Inference = InferenceAnalytic
	opts.Workers = 1
	cover := map[string]int{}
	for s := range worlds {
		es, err := Estimate(context.Background(), w.Panel(uint64(1000+s)), opts)
		if err != nil {
			t.Fatal(err)
		}
		for _, est := range []string{EstimatorCS, EstimatorPPML} {
			e := effectOf(t, es, "layer0", est)
			if e.CI95[0] <= w.Delta && w.Delta <= e.CI95[1] {
				cover[est]++
			}
		}
	}
	for _, est := range []string{EstimatorCS, EstimatorPPML} {
		rate := float64(cover[est]) / worlds
		t.Logf("%s: coverage %.3f over %d worlds", est, rate, worlds)
		if rate < 0.92 || rate > 0.98 {
			t.Errorf("%s: 95%% intervals cover the planted effect in %.1f%% of %d worlds", est, 100*rate, worlds)
		}
	}
}

// TestEstimateBadInput: per-layer problems become warnings, other layers are
// still estimated, and the output marshals.
func TestEstimateBadInput(t *testing.T) {
	w := paneltest.World{PerCohort: 20, Cohorts: []int{8}, Controls: 20, Months: 16, Delta: 0.1, Outcomes: 2}
	p := w.Panel(5)
	clear(p.Y[1]) // layer1 all zero
	es, err := Estimate(context.Background(), p, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	joined := strings.Join(es.Warnings, "\n")
	if !strings.Contains(joined, "layer1: all counts are zero") {
		t.Errorf("warnings %v", es.Warnings)
	}
	n := 0
	for _, e := range es.Effects {
		if e.Layer == "layer1" {
			t.Errorf("all-zero layer estimated: %+v", e)
		}
		if e.Layer == "layer0" {
			n++
			if want := "score-bootstrap-null-imposed-rademacher-999"; e.Estimator == EstimatorPPML && e.Method != want {
				t.Errorf("%s: method %q with 20 treated clusters, want %s", e.Estimator, e.Method, want)
			}
			if !strings.Contains(e.Method, "bootstrap") && e.Estimator == EstimatorDiD2x2 {
				t.Errorf("%s: method %q with 20 treated clusters, want a bootstrap", e.Estimator, e.Method)
			}
		}
	}
	if n != 4 {
		t.Errorf("%d effects for layer0, want 4", n)
	}
	if _, err := json.Marshal(es); err != nil {
		t.Fatal(err)
	}

	bad := []struct {
		name string
		mod  func(p *panel.Panel)
		want string
	}{
		{"no controls", func(p *panel.Panel) {
			for i := range p.Units {
				p.Units[i].FirstTreated = 3
			}
		}, "at least 2 of each"},
		{"no pre-period", func(p *panel.Panel) {
			for i := range p.Units {
				if p.Units[i].Treated() {
					p.Units[i].FirstTreated = 0
				}
			}
		}, "no pre-period"},
	}
	for _, c := range bad {
		t.Run(c.name, func(t *testing.T) {
			p := w.Panel(6)
			c.mod(p)
			es, err := Estimate(context.Background(), p, DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			if len(es.Effects) != 0 || !strings.Contains(strings.Join(es.Warnings, "\n"), c.want) {
				t.Errorf("effects %d, warnings %v; want none and %q", len(es.Effects), es.Warnings, c.want)
			}
		})
	}
	invalid := w.Panel(7)
	invalid.Y[0][5] = math.NaN()
	if _, err := Estimate(context.Background(), invalid, DefaultOptions()); err == nil || !strings.Contains(err.Error(), "unit \"t0\", month 5") {
		t.Errorf("NaN count: err %v", err)
	}
}

// ExampleEstimate estimates a +25% effect planted in an invented world.
func ExampleEstimate() {
	w := paneltest.World{PerCohort: 100, Cohorts: []int{12, 18, 24}, Controls: 300, Months: 40, Delta: 0.25}
	es, err := Estimate(context.Background(), w.Panel(1), DefaultOptions())
	if err != nil {
		fmt.Println(err)
		return
	}
	for _, e := range es.Effects {
		fmt.Printf("%s %s: %+.0f%% [%+.0f%%, %+.0f%%] %s\n", e.Layer, e.Estimator, 100**e.RelativeEffect, 100*e.CI95[0], 100*e.CI95[1], e.Method)
	}
	// Output:
	// layer0 cs-att: +29% [+21%, +37%] influence-function-t(299)
	// layer0 ppml-twfe: +25% [+22%, +27%] score-bootstrap-null-imposed-rademacher-999
	// layer0 twfe-linear: +28% [+20%, +36%] analytic-cr1
	// layer0 did-2x2: +25% [+21%, +28%] analytic-cr1
}

// TestDoublyRobustRemovesCovariateTrend: treated units have higher values of
// a covariate that also drives a trend. The unconditional group-time ATT
// picks the trend up as an effect; the doubly robust one, conditioning on the
// covariate, recovers the planted +20% (Sant'Anna & Zhao 2020: consistent
// when either model is right; here the logistic propensity is, as the
// covariate is normal with equal variance in both groups).
func TestDoublyRobustRemovesCovariateTrend(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 21))
	gam := distuv.Gamma{Alpha: 2, Beta: 0.4, Src: rng}
	const months, delta = 30, 0.2
	p := &panel.Panel{Start: time.Date(2033, 1, 1, 0, 0, 0, 0, time.UTC), Months: months, Outcomes: []string{"attribute"}}
	var y []float64
	for u := range 1200 {
		g, x := -1, rng.NormFloat64()
		if u < 500 {
			g, x = 12+u%3*3, x+1
		}
		p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("u%d", u), FirstTreated: g, Weight: 1, Covariates: []float64{x}})
		a := gam.Rand()
		for m := range months {
			lam := a * math.Exp(0.015*x*float64(m))
			if g >= 0 && m >= g {
				lam *= 1 + delta
			}
			y = append(y, distuv.Poisson{Lambda: lam, Src: rng}.Rand())
		}
	}
	p.Y = [][]float64{y}
	opts := DefaultOptions()
	opts.Inference = InferenceAnalytic
	cl, G := p.ClusterIndex()
	dr, err := callawaySantAnna(p, y, cl, G, opts, nil, true)
	if err != nil {
		t.Fatal(err)
	}
	un, err := callawaySantAnna(p, y, cl, G, opts, nil, false)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(dr.overall.rel-delta) > 0.05 || dr.overall.relLo > delta || dr.overall.relHi < delta {
		t.Errorf("doubly robust relative effect %.3f [%.3f, %.3f], planted %.2f", dr.overall.rel, dr.overall.relLo, dr.overall.relHi, delta)
	}
	if un.overall.relLo <= delta {
		t.Errorf("unconditional relative effect %.3f [%.3f, %.3f] should be biased upward by the covariate trend", un.overall.rel, un.overall.relLo, un.overall.relHi)
	}
	if !strings.Contains(dr.overall.note, "doubly robust") {
		t.Errorf("note %q", dr.overall.note)
	}
}

// TestEstimateSingularCovariates: a covariate that is the same for every
// unit is collinear with the intercept; the doubly robust fit must fail with
// a warning and the unconditional estimator take over.
func TestEstimateSingularCovariates(t *testing.T) {
	w := paneltest.World{PerCohort: 40, Cohorts: []int{8}, Controls: 40, Months: 16, Delta: 0.1}
	p := w.Panel(9)
	for i := range p.Units {
		p.Units[i].Covariates = []float64{2}
	}
	es, err := Estimate(context.Background(), p, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	// A robustness check's problem is information (a note), not an alarm.
	if !strings.Contains(strings.Join(es.Notes, "\n"), "doubly robust estimator failed") {
		t.Errorf("notes %v", es.Notes)
	}
	if strings.Contains(strings.Join(es.Warnings, "\n"), "doubly robust") {
		t.Errorf("a robustness check's failure among the warnings: %v", es.Warnings)
	}
	if e := effectOf(t, es, "layer0", EstimatorCS); !strings.HasPrefix(e.Note, "unconditional") {
		t.Errorf("note %q", e.Note)
	}
}

// TestEstimateRandomPanelsNeverFail runs Estimate on small random panels
// (few units, sparse counts, treatment anywhere including the first and last
// month, zero weights, shared clusters, covariates) and checks that it never
// panics, never errors on a valid panel, and always marshals to JSON.
func TestEstimateRandomPanelsNeverFail(t *testing.T) {
	for seed := range uint64(300) {
		rng := rand.New(rand.NewPCG(seed, 5))
		months := 2 + rng.IntN(10)
		n := 2 + rng.IntN(12)
		p := &panel.Panel{Start: time.Date(2034, 1, 1, 0, 0, 0, 0, time.UTC), Months: months, Outcomes: []string{"a", "b"}}
		cov := rng.IntN(2) == 0
		for u := range n {
			un := panel.Unit{ID: fmt.Sprint(u), FirstTreated: rng.IntN(months+1) - 1, Weight: float64(rng.IntN(3)) / 2, Cluster: fmt.Sprint(rng.IntN(n))}
			if cov {
				un.Covariates = []float64{rng.NormFloat64(), float64(rng.IntN(2))}
			}
			p.Units = append(p.Units, un)
		}
		for range p.Outcomes {
			y := make([]float64, n*months)
			for i := range y {
				if rng.IntN(3) == 0 {
					y[i] = float64(rng.IntN(4))
				}
			}
			p.Y = append(p.Y, y)
		}
		opts := DefaultOptions()
		opts.Window = Window{Pre: 1 + rng.IntN(4), Post: 1 + rng.IntN(4)}
		opts.Draws = 99
		es, err := Estimate(context.Background(), p, opts)
		if err != nil {
			t.Fatalf("seed %d: %v", seed, err)
		}
		if _, err := json.Marshal(es); err != nil {
			t.Fatalf("seed %d: %v", seed, err)
		}
	}
}
