package did

import (
	"context"
	"errors"
	"math"
	"testing"

	"github.com/loadwake/loadwake/audit/did/poisson"
	"github.com/loadwake/loadwake/audit/internal/reftest"
	"github.com/loadwake/loadwake/audit/panel/paneltest"
)

// TestPoissonFEFatalities fits fatal ~ beertax + unemp with state and year
// fixed effects on the Fatalities data of R's AER package (Stock & Watson,
// Introduction to Econometrics; 48 US states, 1982-1988) and compares with
// R 4.2.2 glm(family = poisson) with factor dummies and sandwich 3.0.2
// vcovCL(cluster = ~state, type = "HC1"): testdata/glm_fatalities_ref.csv,
// written by testdata/R/glm_fatalities.R.
func TestPoissonFEFatalities(t *testing.T) {
	_, rows := reftest.ReadCSV(t, "testdata/glm_fatalities.csv")
	n := len(rows)
	y := make([]float64, n)
	x := [][]float64{make([]float64, n), make([]float64, n)}
	st, yr := make([]int, n), make([]int, n)
	states := map[string]int{}
	for i, r := range rows {
		s, ok := states[r[0]]
		if !ok {
			s = len(states)
			states[r[0]] = s
		}
		st[i] = s
		yr[i] = int(reftest.Atof(t, r[1])) - 1982
		y[i] = reftest.Atof(t, r[2])
		x[0][i] = reftest.Atof(t, r[3])
		x[1][i] = reftest.Atof(t, r[4])
	}
	if len(states) != 48 || n != 336 {
		t.Fatalf("%d states, %d rows; want 48 and 336", len(states), n)
	}
	fit, err := fitPoissonFE(y, x, st, 48, yr, 7, nil, st, 48)
	if err != nil {
		t.Fatal(err)
	}
	ref := reftest.Terms(t, "testdata/glm_fatalities_ref.csv")
	for j, term := range []string{"beertax", "unemp"} {
		t.Run(term, func(t *testing.T) {
			if d := math.Abs(fit.Beta[j] - ref[term]["estimate"]); d > 1e-6 {
				t.Errorf("coefficient %.10f, R glm %.10f", fit.Beta[j], ref[term]["estimate"])
			}
			se := math.Sqrt(fit.Vcov.At(j, j))
			if d := math.Abs(se - ref[term]["se_state"]); d > 1e-4*ref[term]["se_state"] {
				t.Errorf("clustered SE %.10f, R sandwich::vcovCL %.10f", se, ref[term]["se_state"])
			}
		})
	}
}

// TestPoissonFEDropsAllZeroGroups: a unit with zeros throughout cannot inform
// the slope under unit fixed effects (its effect goes to −∞); it must be
// dropped, counted, and leave the estimate unchanged.
func TestPoissonFEDropsAllZeroGroups(t *testing.T) {
	// 3 units x 4 months; unit 2 all zero.
	y := []float64{1, 2, 4, 3, 2, 2, 5, 6, 0, 0, 0, 0}
	d := []float64{0, 0, 1, 1, 0, 0, 0, 0, 0, 0, 1, 1}
	u := []int{0, 0, 0, 0, 1, 1, 1, 1, 2, 2, 2, 2}
	m := []int{0, 1, 2, 3, 0, 1, 2, 3, 0, 1, 2, 3}
	full, err := fitPoissonFE(y, [][]float64{d}, u, 3, m, 4, nil, u, 3)
	if err != nil {
		t.Fatal(err)
	}
	if full.Dropped1 != 1 {
		t.Errorf("dropped %d unit groups, want 1", full.Dropped1)
	}
	small, err := fitPoissonFE(y[:8], [][]float64{d[:8]}, u[:8], 2, m[:8], 4, nil, u[:8], 2)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(full.Beta[0]-small.Beta[0]) > 1e-10 {
		t.Errorf("slope %v with the zero unit, %v without", full.Beta[0], small.Beta[0])
	}
	// Two units, one treated block of months: the Poisson first-order
	// conditions match unit, month and treated-block sums, which gives the
	// log ratio of ratios log((4+3)/(1+2)) − log((5+6)/(2+2)) (derived by
	// hand from the Poisson score equations).
	want := math.Log(7.0/3) - math.Log(11.0/4)
	if math.Abs(small.Beta[0]-want) > 1e-9 {
		t.Errorf("2x2 Poisson slope %v, want %v", small.Beta[0], want)
	}
}

// TestStackedPoissonMatchesDummyFit: the concentrated Newton fit of the
// stacked design must give the dummy-variable Poisson fit's coefficient,
// CR1 variance and bootstrap contributions (fitPoissonFE, itself checked
// against R's glm above), including with all-zero units and weights.
func TestStackedPoissonMatchesDummyFit(t *testing.T) {
	w := paneltest.World{PerCohort: 15, Cohorts: []int{5, 8, 11}, Controls: 30, Months: 18, Delta: 0.3}
	for _, seed := range []uint64{1, 2, 3} {
		p := w.Panel(seed)
		for u := range 4 { // some all-zero units, some weights
			for m := range p.Months {
				p.Y[0][(u*7)*p.Months+m] = 0
			}
		}
		for u := 50; u < 70; u++ {
			p.Units[u].Weight = 0.3 + float64(u%5)/4
		}
		cl, G := p.ClusterIndex()
		st := stackPanel(p, p.Y[0], cl, Window{Pre: 4, Post: 6}, 0)
		fast, err := poisson.FitStacked(st.y, [][]float64{st.d}, st.w, st.cl, G, st.blocks, st.n2)
		if err != nil {
			t.Fatal(err)
		}
		slow, err := fitPoissonFE(st.y, [][]float64{st.d}, st.f1, st.n1, st.f2, st.n2, st.w, st.cl, G)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(fast.Beta[0]-slow.Beta[0]) > 1e-8 {
			t.Errorf("seed %d: beta %v concentrated, %v dummy fit", seed, fast.Beta[0], slow.Beta[0])
		}
		if v1, v2 := fast.Vcov.At(0, 0), slow.Vcov.At(0, 0); math.Abs(v1-v2) > 1e-6*v2 {
			t.Errorf("seed %d: variance %v concentrated, %v dummy fit", seed, v1, v2)
		}
		if fast.Dropped1 != slow.Dropped1 || fast.Dropped1 == 0 {
			t.Errorf("seed %d: dropped %d and %d units", seed, fast.Dropped1, slow.Dropped1)
		}
		for g := range G {
			if math.Abs(fast.A[0][g]-slow.A[0][g]) > 1e-7 {
				t.Fatalf("seed %d: cluster %d contribution %v vs %v", seed, g, fast.A[0][g], slow.A[0][g])
			}
		}
	}
}

// TestStackedPoissonEventStudyMatchesDummyFit: with one regressor per event
// month the concentrated fit must still give the dummy-variable fit's
// coefficients and CR1 covariance (fitPoissonFE, checked against R's glm).
func TestStackedPoissonEventStudyMatchesDummyFit(t *testing.T) {
	w := paneltest.World{PerCohort: 8, Cohorts: []int{5, 8}, Controls: 20, Months: 14, Delta: 0.3}
	p := w.Panel(4)
	for u := 30; u < 36; u++ {
		p.Units[u].Weight = 0.5 + float64(u%3)/2
	}
	cl, G := p.ClusterIndex()
	win := Window{Pre: 3, Post: 4}
	st := stackPanel(p, p.Y[0], cl, win, 0)
	var x [][]float64
	for e := -win.Pre; e < win.Post; e++ {
		if e == -1 {
			continue
		}
		col := make([]float64, len(st.y))
		for i, ev := range st.ev {
			if ev == e {
				col[i] = 1
			}
		}
		x = append(x, col)
	}
	fast, err := poisson.FitStacked(st.y, x, st.w, st.cl, G, st.blocks, st.n2)
	if err != nil {
		t.Fatal(err)
	}
	slow, err := fitPoissonFE(st.y, x, st.f1, st.n1, st.f2, st.n2, st.w, st.cl, G)
	if err != nil {
		t.Fatal(err)
	}
	for j := range x {
		if math.Abs(fast.Beta[j]-slow.Beta[j]) > 1e-8 {
			t.Errorf("b[%d] %v concentrated, %v dummy fit", j, fast.Beta[j], slow.Beta[j])
		}
		for k := range x {
			if v1, v2 := fast.Vcov.At(j, k), slow.Vcov.At(j, k); math.Abs(v1-v2) > 1e-6*math.Sqrt(slow.Vcov.At(j, j)*slow.Vcov.At(k, k)) {
				t.Errorf("V[%d,%d] %v concentrated, %v dummy fit", j, k, v1, v2)
			}
		}
	}
}

// TestPPMLFewTreatedUsesRandomization: with three treated units no interval
// is reliable (infer.MinTreatedForInterval), so the headline gives none, its
// p-value is the randomization test's, and a planted +150% is still found.
func TestPPMLFewTreatedUsesRandomization(t *testing.T) {
	w := paneltest.World{PerCohort: 3, Cohorts: []int{8}, Controls: 17, Months: 16, Delta: 1.5}
	p := w.Panel(11)
	opts := DefaultOptions()
	opts.Window = Window{Pre: 6, Post: 8}
	cl, G := p.ClusterIndex()
	e, err := stackedPPML(context.Background(), p, p.Y[0], cl, G, opts, rngFor(1, "layer0", EstimatorPPML))
	if err != nil {
		t.Fatal(err)
	}
	// C(20, 3) = 1140 reassignments, all enumerated.
	if !e.noInterval || e.method != "randomization-exact-1140" {
		t.Errorf("method %q, no interval %v; want randomization-exact-1140 and no interval", e.method, e.noInterval)
	}
	if e.relLo != e.rel || e.relHi != e.rel {
		t.Errorf("interval [%v, %v] around %v; want none", e.relLo, e.relHi, e.rel)
	}
	if e.p > 0.01 || e.p < 1.0/1140 {
		t.Errorf("randomization p %v for a planted +150%%; want in [1/1140, 0.01]", e.p)
	}
	if e.hasPre {
		t.Errorf("pre-trend p %v with 3 treated clusters; want no test", e.preP)
	}
}

// TestPPMLSeparatedLayer: a layer where every import area has zero counts
// after the import is diagnosed by name (ErrSeparated), not estimated.
func TestPPMLSeparatedLayer(t *testing.T) {
	w := paneltest.World{PerCohort: 6, Cohorts: []int{8}, Controls: 12, Months: 16}
	p := w.Panel(3)
	for u, un := range p.Units {
		if un.Treated() {
			for m := un.FirstTreated; m < p.Months; m++ {
				p.Y[0][u*p.Months+m] = 0
			}
		}
	}
	cl, G := p.ClusterIndex()
	_, err := stackedPPML(context.Background(), p, p.Y[0], cl, G, DefaultOptions(), rngFor(1, "layer0", EstimatorPPML))
	if !errors.Is(err, ErrSeparated) {
		t.Fatalf("error %v, want ErrSeparated", err)
	}
}
