package infer

import (
	"context"
	"errors"
	"math"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/reftest"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// TestWaldAgainstSandwich checks the joint Wald statistic of year effects in
// lm(y ~ x + factor(year)) on Petersen's data, firm-clustered HC1 covariance,
// against R 4.2.2 lmtest 0.9.40 waldtest and sandwich 3.0.2 vcovCL
// (testdata/wald_ref.csv).
func TestWaldAgainstSandwich(t *testing.T) {
	p := wcrLoadPetersen(t)
	d, _ := p.design(t, "year_fe_firm")
	f, err := FitOLS(d)
	if err != nil {
		t.Fatal(err)
	}
	for _, r := range wcrRows(t, "wald_ref.csv") {
		t.Run(r[1], func(t *testing.T) {
			q := int(reftest.Atof(t, r[2]))
			R := mat.NewDense(q, 11, nil)
			for j := range q {
				R.Set(j, 2+j, 1)
			}
			// 500 firms, none "treated": use half as the treated arm for the F.
			res, err := f.Wald(R, nil, 250)
			if err != nil {
				t.Fatal(err)
			}
			want := reftest.Atof(t, r[3])
			if math.Abs(res.Stat-want) > 1e-9*want {
				t.Fatalf("W = %.15g, R %.15g", res.Stat, want)
			}
			if res.Q != q || !res.HasF || res.DF1 != q || res.DF2 != 249 {
				t.Fatalf("q %d, F df (%d, %d), has F %v", res.Q, res.DF1, res.DF2, res.HasF)
			}
			// F = W/q on (q, H − 1) with H = 250.
			wantP := distuv.F{D1: float64(q), D2: 249}.Survival(want / float64(q))
			if math.Abs(res.F-want/float64(q)) > 1e-9*want || math.Abs(res.PF-wantP) > 1e-9 {
				t.Fatalf("F = %v (p %v), want %v (p %v)", res.F, res.PF, want/float64(q), wantP)
			}
		})
	}
}

func TestWaldScalarIsSquaredT(t *testing.T) {
	toy := wcrMakeToy(t, 12, 5, 9)
	f, err := FitOLS(Design{X: toy.x, Y: toy.y, Weights: toy.w, Cluster: toy.cl})
	if err != nil {
		t.Fatal(err)
	}
	res, err := f.Wald(mat.NewDense(1, 3, []float64{0, 1, 0}), []float64{0.3}, 5)
	if err != nil {
		t.Fatal(err)
	}
	tt := f.TStat([]float64{0, 1, 0}, 0.3)
	if math.Abs(res.Stat-tt*tt) > 1e-10*res.Stat {
		t.Fatalf("W %v, t² %v", res.Stat, tt*tt)
	}
	// q = 1: the F test is the two-sided t test on H − 1 = 4 degrees of freedom.
	pt := 2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: 4}.Survival(math.Abs(tt))
	if math.Abs(res.PF-pt) > 1e-10 {
		t.Fatalf("PF %v, t(4) p %v", res.PF, pt)
	}
	// One treated cluster: no F.
	res, err = f.Wald(mat.NewDense(2, 3, []float64{0, 1, 0, 0, 0, 1}), nil, 1)
	if err != nil {
		t.Fatal(err)
	}
	if res.HasF || !math.IsNaN(res.PF) {
		t.Fatalf("F with H = 1: %+v", res)
	}
	if _, err := f.Wald(mat.NewDense(1, 2, []float64{1, 0}), nil, 2); !errors.Is(err, ErrRequest) {
		t.Fatalf("wrong width: %v", err)
	}
	if _, err := f.Wald(mat.NewDense(2, 3, []float64{0, 1, 0, 0, 2, 0}), nil, 5); !errors.Is(err, ErrRequest) {
		t.Fatalf("redundant rows: %v", err)
	}
}

// wcrBruteW returns bootstrap Wald statistics of Rβ = 0 by brute force.
func wcrBruteW(tb testing.TB, toy wcrToy, R *mat.Dense, v *mat.Dense) []float64 {
	tb.Helper()
	q, _ := R.Dims()
	betas, covs := wcrBruteRefits(tb, toy, R, make([]float64, q), v)
	out := make([]float64, len(betas))
	for b := range betas {
		var d mat.VecDense
		d.MulVec(R, mat.NewVecDense(len(betas[b]), betas[b]))
		var rv, rvr, rvrInv mat.Dense
		rv.Mul(R, covs[b])
		rvr.Mul(&rv, R.T())
		if err := rvrInv.Inverse(&rvr); err != nil {
			tb.Fatal(err)
		}
		out[b] = mat.Inner(&d, &rvrInv, &d)
	}
	return out
}

func TestWildWaldAgainstBruteForce(t *testing.T) {
	cases := []struct {
		name    string
		G, tr   int
		R       []float64
		weights WeightScheme
		draws   int
	}{
		{"two restrictions, enumerated", 9, 3, []float64{0, 1, 0, 0, 0, 1}, Rademacher, 999},
		{"one restriction, enumerated", 8, 4, []float64{0, 1, 0}, Rademacher, 256},
		{"two restrictions, webb", 12, 2, []float64{0, 1, 0, 0, 0, 1}, Webb, 199},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			toy := wcrMakeToy(t, c.G, c.tr, uint64(c.G+c.tr))
			f, err := FitOLS(Design{X: toy.x, Y: toy.y, Weights: toy.w, Cluster: toy.cl})
			if err != nil {
				t.Fatal(err)
			}
			R := mat.NewDense(len(c.R)/3, 3, c.R)
			o := WildOptions{Draws: c.draws, Weights: c.weights, Seed: 4}
			res, err := f.WildWald(context.Background(), R, nil, o)
			if err != nil {
				t.Fatal(err)
			}
			v := mat.NewDense(res.Draws, c.G, nil)
			oo, _ := o.withDefaults(c.G)
			wcrFill(v, 0, res.Enumerated, c.weights, oo.Rand)
			brute := wcrBruteW(t, toy, R, v)
			hits := 0
			for b, want := range brute {
				if math.Abs(res.WStar[b]-want) > 1e-8*(1+want) {
					t.Fatalf("draw %d: W* %v, brute force %v", b, res.WStar[b], want)
				}
				if want >= res.Stat*(1-wcrTol) {
					hits++
				}
			}
			if p := float64(hits) / float64(len(brute)); math.Abs(res.P-p) > 1e-10 {
				t.Fatalf("p %v, brute force %v", res.P, p)
			}
			wd, err := f.Wald(R, nil, c.tr)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(wd.Stat-res.Stat) > 1e-10*res.Stat {
				t.Fatalf("W %v from Wald, %v from WildWald", wd.Stat, res.Stat)
			}
			if len(c.R) == 3 {
				// One restriction: the symmetric WCR t test gives the same p.
				wt, err := f.WildTest(context.Background(), c.R, 0, o)
				if err != nil {
					t.Fatal(err)
				}
				if math.Abs(wt.PSymmetric-res.P) > 1e-10 {
					t.Fatalf("p %v from WildWald, %v from WildTest", res.P, wt.PSymmetric)
				}
			}
		})
	}
}
