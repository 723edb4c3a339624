package infer

import (
	"errors"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/reftest"
	"gonum.org/v1/gonum/mat"
)

// wcrPetersen holds Petersen's data (testdata/petersen.csv).
type wcrPetersen struct {
	firm, year []int
	x, y       []float64
}

func wcrLoadPetersen(tb testing.TB) wcrPetersen {
	tb.Helper()
	var p wcrPetersen
	for _, r := range wcrRows(tb, "petersen.csv") {
		p.firm = append(p.firm, int(reftest.Atof(tb, r[0])))
		p.year = append(p.year, int(reftest.Atof(tb, r[1])))
		p.x = append(p.x, reftest.Atof(tb, r[2]))
		p.y = append(p.y, reftest.Atof(tb, r[3]))
	}
	return p
}

// design returns the model named as in cr1_ref.csv and the column of each
// reference term (as an a vector).
func (p wcrPetersen) design(tb testing.TB, model string) (Design, map[string][]float64) {
	tb.Helper()
	n := len(p.y)
	unit := func(k, j int) []float64 { a := make([]float64, k); a[j] = 1; return a }
	switch model {
	case "ols_firm", "ols_year", "wls_firm":
		x := mat.NewDense(n, 2, nil)
		for i := range n {
			x.Set(i, 0, 1)
			x.Set(i, 1, p.x[i])
		}
		d := Design{X: x, Y: p.y, Cluster: p.firm}
		if model == "ols_year" {
			d.Cluster = p.year
		}
		if model == "wls_firm" {
			d.Weights = make([]float64, n)
			for i, f := range p.firm {
				d.Weights[i] = 1 + float64(f%3)
			}
		}
		return d, map[string][]float64{"(Intercept)": unit(2, 0), "x": unit(2, 1)}
	case "year_fe_firm":
		x := mat.NewDense(n, 11, nil)
		for i := range n {
			x.Set(i, 0, 1)
			x.Set(i, 1, p.x[i])
			if p.year[i] > 1 {
				x.Set(i, p.year[i], 1) // year y ≥ 2 in column y
			}
		}
		lc := unit(11, 1)
		lc[2], lc[10] = 1, -1
		return Design{X: x, Y: p.y, Cluster: p.firm}, map[string][]float64{
			"x": unit(11, 1), "factor(year)2": unit(11, 2), "factor(year)10": unit(11, 10), "x+year2-year10": lc}
	case "firm_fe_firm":
		return Design{X: mat.NewDense(n, 1, p.x), Y: p.y, Cluster: p.firm, Absorb: p.firm},
			map[string][]float64{"x": unit(1, 0)}
	}
	tb.Fatalf("unknown model %q", model)
	return Design{}, nil
}

// TestCR1AgainstSandwich checks estimates, CR1 standard errors and t
// statistics against R 4.2.2 sandwich 3.0.2 vcovCL(type = "HC1") with
// lmtest 0.9.40 coeftest on Petersen's data (testdata/cr1_ref.csv, made by
// testdata/R/petersen_infer.R).
func TestCR1AgainstSandwich(t *testing.T) {
	p := wcrLoadPetersen(t)
	fits := map[string]*OLS{}
	for _, r := range wcrRows(t, "cr1_ref.csv") {
		model, term := r[0], r[1]
		t.Run(model+"/"+term, func(t *testing.T) {
			d, terms := p.design(t, model)
			f := fits[model]
			if f == nil {
				var err error
				if f, err = FitOLS(d); err != nil {
					t.Fatal(err)
				}
				fits[model] = f
			}
			a, ok := terms[term]
			if !ok {
				t.Fatalf("no term %q", term)
			}
			est, se, tt := reftest.Atof(t, r[2]), reftest.Atof(t, r[3]), reftest.Atof(t, r[4])
			got := []float64{wcrDot(a, f.Beta), f.SE(a), f.TStat(a, 0)}
			for i, want := range []float64{est, se, tt} {
				if math.Abs(got[i]-want) > 1e-9*math.Max(1, math.Abs(want)) {
					t.Errorf("%s: got %.15g, sandwich %.15g", []string{"estimate", "se", "t"}[i], got[i], want)
				}
			}
		})
	}
	if f := fits["firm_fe_firm"]; f != nil && (f.K != 501 || f.G != 500 || f.N != 5000) {
		t.Errorf("firm effects: K, G, N = %d, %d, %d; want 501, 500, 5000 (lm's parameter count)", f.K, f.G, f.N)
	}
}

func TestFitOLSBadInput(t *testing.T) {
	x := mat.NewDense(4, 2, []float64{1, 0, 1, 1, 1, 2, 1, 3})
	cases := []struct {
		name string
		d    Design
		msg  string
	}{
		{"short y", Design{X: x, Y: []float64{1, 2, 3}, Cluster: []int{1, 1, 2, 2}}, "3 outcomes for 4 rows"},
		{"short clusters", Design{X: x, Y: []float64{1, 2, 3, 4}, Cluster: []int{1, 2}}, "2 cluster ids"},
		{"nan outcome", Design{X: x, Y: []float64{1, math.NaN(), 3, 4}, Cluster: []int{1, 1, 2, 2}}, "row 1"},
		{"negative weight", Design{X: x, Y: []float64{1, 2, 3, 4}, Weights: []float64{1, 1, -1, 1}, Cluster: []int{1, 1, 2, 2}}, "weight -1 at row 2"},
		{"one cluster", Design{X: x, Y: []float64{1, 2, 3, 4}, Cluster: []int{1, 1, 1, 1}}, "1 cluster(s)"},
		{"collinear", Design{X: mat.NewDense(4, 2, []float64{1, 2, 1, 2, 1, 2, 1, 2}), Y: []float64{1, 2, 3, 4}, Cluster: []int{1, 1, 2, 2}}, "singular"},
		{"no X", Design{Y: []float64{1}, Cluster: []int{1}}, "no regressors"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := FitOLS(c.d)
			if !errors.Is(err, ErrDesign) || !strings.Contains(err.Error(), c.msg) {
				t.Fatalf("error %v, want ErrDesign mentioning %q", err, c.msg)
			}
		})
	}
}

func TestFitOLSNonFiniteX(t *testing.T) {
	x := mat.NewDense(4, 2, []float64{1, 0, 1, math.Inf(1), 1, 2, 1, 3})
	_, err := FitOLS(Design{X: x, Y: []float64{1, 2, 3, 4}, Cluster: []int{2, 1, 2, 1}})
	if !errors.Is(err, ErrDesign) || !strings.Contains(err.Error(), "X[1, 1]") {
		t.Fatalf("error %v, want ErrDesign naming X[1, 1]", err)
	}
}

// wcrRows reads testdata/name without its header row.
func wcrRows(tb testing.TB, name string) [][]string {
	tb.Helper()
	_, rows := reftest.ReadCSV(tb, filepath.Join("testdata", name))
	return rows
}
