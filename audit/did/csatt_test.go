package did

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/panel"
)

// handPanel is the worked example below: 3 months, cohort g=1 (a1, a2),
// cohort g=2 (b1, b2), never-treated controls c1 (weight 1) and c2 (weight 3).
//
//	unit  w  y0 y1 y2
//	a1    1   1  3  4
//	a2    1   2  6  7
//	b1    1   0  1  5
//	b2    1   2  2  6
//	c1    1   1  2  2
//	c2    3   3  3  5
//
// ATT(1,1), base 0: treated change (2+4)/2 = 3, controls (1·1+3·0)/4 = 0.25 → 2.75
// ATT(1,2), base 0: (3+5)/2 = 4, controls (1·1+3·2)/4 = 1.75 → 2.25
// ATT(2,2), base 1: (4+4)/2 = 4, controls (1·0+3·2)/4 = 1.5 → 2.5
// ATT(2,1), base 0 (pre, varying base): (1+0)/2 = 0.5, controls 0.25 → 0.25
// overall (equal cohort sizes): (2.75+2.25+2.5)/3 = 2.5
// e=0: (2.75+2.5)/2 = 2.625; e=1: 2.25; e=−1: 0.25
// treated post mean: (4.5+5.5+5.5)/3 = 31/6; relative effect 2.5/(31/6−2.5) = 0.9375
func handPanel() *panel.Panel {
	p := &panel.Panel{Start: time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC), Months: 3, Outcomes: []string{"geometry"}}
	rows := []struct {
		id string
		g  int
		w  float64
		y  [3]float64
	}{
		{"a1", 1, 1, [3]float64{1, 3, 4}}, {"a2", 1, 1, [3]float64{2, 6, 7}},
		{"b1", 2, 1, [3]float64{0, 1, 5}}, {"b2", 2, 1, [3]float64{2, 2, 6}},
		{"c1", -1, 1, [3]float64{1, 2, 2}}, {"c2", -1, 3, [3]float64{3, 3, 5}},
	}
	var y []float64
	for _, r := range rows {
		p.Units = append(p.Units, panel.Unit{ID: r.id, FirstTreated: r.g, Weight: r.w})
		y = append(y, r.y[:]...)
	}
	p.Y = [][]float64{y}
	return p
}

func TestCSHandExample(t *testing.T) {
	p := handPanel()
	opts := DefaultOptions()
	opts.Window = Window{Pre: 1, Post: 2}
	opts.Inference = InferenceAnalytic
	cl, G := p.ClusterIndex()
	res, err := callawaySantAnna(p, p.Y[0], cl, G, opts, rand.New(rand.NewPCG(1, 1)), false)
	if err != nil {
		t.Fatal(err)
	}
	check := func(name string, got, want float64) {
		t.Helper()
		if math.Abs(got-want) > 1e-12 {
			t.Errorf("%s: got %v, want %v (worked by hand above)", name, got, want)
		}
	}
	check("overall", res.overall.att, 2.5)
	check("relative", res.overall.rel, 0.9375)
	check("cohort 1", res.byCohort[1], 2.5)
	check("cohort 2", res.byCohort[2], 2.5)
	if len(res.overall.cohorts) != 2 {
		t.Fatalf("%d cohort rows, want 2", len(res.overall.cohorts))
	}
	for _, c := range res.overall.cohorts {
		check("cohort row", c.est, 2.5)
		if c.units != 2 || !(c.lo < c.est && c.est < c.hi) {
			t.Errorf("cohort row %+v", c)
		}
	}
	want := map[int]float64{-1: 0.25, 0: 2.625, 1: 2.25}
	if len(res.events) != 3 {
		t.Fatalf("%d event times, want 3", len(res.events))
	}
	for _, ev := range res.events {
		check("event", ev.est, want[ev.e])
	}
}

// TestCSInfluenceMatchesPerturbation checks the analytic influence contributions
// of a cell against the numerical derivative: removing a little weight from
// one unit moves the estimate by ε·φ (the definition of an influence
// function, Hampel 1974; derivative with respect to the log weight). Done for the unconditional and the doubly robust cell.
func TestCSInfluenceMatchesPerturbation(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	p := &panel.Panel{Start: time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC), Months: 2, Outcomes: []string{"y"}}
	var y []float64
	for i := range 40 {
		g := -1
		if i < 15 {
			g = 1
		}
		x := rng.NormFloat64()
		p.Units = append(p.Units, panel.Unit{ID: string(rune('A' + i)), FirstTreated: g, Weight: 0.5 + rng.Float64(), Covariates: []float64{x}})
		y = append(y, 5+x+rng.Float64(), 6+2*x+rng.Float64())
	}
	for i := range 15 {
		p.Units[i].Weight = 1
	}
	p.Y = [][]float64{y}
	for _, dr := range []bool{false, true} {
		r := newCSRun(p, y)
		us := []int{}
		for i := range 15 {
			us = append(us, i)
		}
		if dr {
			if err := r.prepareDR(map[int][]int{1: us}); err != nil {
				t.Fatal(err)
			}
		}
		base := r.cell(1, us, 1, 0)
		// perturb control unit 20's weight
		const eps = 1e-6
		u := 20
		ci := u - 15
		w0 := p.Units[u].Weight
		p.Units[u].Weight = w0 * (1 + eps)
		r2 := newCSRun(p, y)
		if dr {
			if err := r2.prepareDR(map[int][]int{1: us}); err != nil {
				t.Fatal(err)
			}
		}
		pert := r2.cell(1, us, 1, 0)
		p.Units[u].Weight = w0
		// d att / d log w_u = φ_u · n_eff-scaling: for a weighted M-estimator the
		// derivative of the estimate with respect to log weight equals φ_u.
		deriv := (pert.att - base.att) / eps
		if math.Abs(deriv-base.phiC[ci]) > 1e-4*math.Max(1, math.Abs(deriv)) {
			t.Errorf("dr=%v: d att/d log w = %v, influence contribution %v", dr, deriv, base.phiC[ci])
		}
	}
}

// TestDRSaturatedBinary: with one binary covariate both the logistic
// propensity and the linear outcome model are saturated, so the doubly robust
// DiD equals the stratified DiD that weights each stratum's 2x2 by the
// treated units' share in it (Sant'Anna & Zhao 2020, section 2; derived by
// hand). Strata: x=0 and x=1.
func TestDRSaturatedBinary(t *testing.T) {
	p := &panel.Panel{Start: time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC), Months: 2, Outcomes: []string{"y"}}
	type u struct {
		g      int
		x      float64
		w      float64
		y0, y1 float64
	}
	units := []u{
		{1, 0, 1, 2, 5}, {1, 0, 1, 3, 5}, {1, 1, 1, 4, 9}, // treated: x=0 change 2.5, x=1 change 5
		{-1, 0, 1, 1, 2}, {-1, 0, 2, 2, 2}, {-1, 1, 1, 3, 4}, {-1, 1, 3, 1, 5}, // controls
	}
	var y []float64
	for i, v := range units {
		p.Units = append(p.Units, panel.Unit{ID: string(rune('a' + i)), FirstTreated: v.g, Weight: v.w, Covariates: []float64{v.x}})
		y = append(y, v.y0, v.y1)
	}
	p.Y = [][]float64{y}
	// control changes: x=0: (1·1 + 2·0)/3 = 1/3; x=1: (1·1 + 3·4)/4 = 13/4
	want := 2.0/3*(2.5-1.0/3) + 1.0/3*(5-13.0/4)
	r := newCSRun(p, y)
	if err := r.prepareDR(map[int][]int{1: {0, 1, 2}}); err != nil {
		t.Fatal(err)
	}
	got := r.cell(1, []int{0, 1, 2}, 1, 0).att
	if math.Abs(got-want) > 1e-9 {
		t.Errorf("doubly robust %v, stratified %v", got, want)
	}
}
