package did

import (
	"math"
	"testing"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/did/poisson"
	"github.com/loadwake/loadwake/audit/internal/reftest"
	"gonum.org/v1/gonum/mat"
)

// TestCR1Petersen checks the cluster-robust variance against Petersen's (2009,
// Review of Financial Studies 22(1)) simulated test data, as shipped in R's
// sandwich package (data set PetersenCL; testdata/petersen.csv, made by
// testdata/R/petersen.R).
func TestCR1Petersen(t *testing.T) {
	_, rows := reftest.ReadCSV(t, "testdata/petersen.csv")
	if len(rows) != 5000 {
		t.Fatalf("petersen.csv has %d rows, want 5000", len(rows))
	}
	x := mat.NewDense(len(rows), 2, nil)
	y := make([]float64, len(rows))
	firm := make([]int, len(rows))
	year := make([]int, len(rows))
	for i, r := range rows {
		firm[i] = int(reftest.Atof(t, r[0])) - 1
		year[i] = int(reftest.Atof(t, r[1])) - 1
		x.Set(i, 0, 1)
		x.Set(i, 1, reftest.Atof(t, r[2]))
		y[i] = reftest.Atof(t, r[3])
	}
	byFirm, err := olsCR1(x, y, nil, firm, 500)
	if err != nil {
		t.Fatal(err)
	}
	byYear, err := olsCR1(x, y, nil, year, 10)
	if err != nil {
		t.Fatal(err)
	}
	ref := reftest.Terms(t, "testdata/petersen_ref.csv")["x"]
	cases := []struct {
		name      string
		got, want float64
		published float64 // Petersen's web page / sandwich vignette values, 5 digits
	}{
		// R 4.2.2 lm() and sandwich 3.0.2 vcovCL(type = "HC1"), written by testdata/R/petersen.R
		{"slope", byFirm.beta[1], ref["estimate"], 1.03483},
		{"OLS SE", math.Sqrt(byFirm.vOLS.At(1, 1)), ref["se_ols"], 0.02858},
		{"firm-clustered SE", math.Sqrt(byFirm.vCR1.At(1, 1)), ref["se_firm"], 0.05060},
		{"year-clustered SE", math.Sqrt(byYear.vCR1.At(1, 1)), ref["se_year"], 0.03339},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if math.Abs(c.got-c.want) > 1e-8 {
				t.Errorf("got %.10f, R sandwich gives %.10f", c.got, c.want)
			}
			if math.Abs(c.got-c.published) > 1e-4 {
				t.Errorf("got %.6f, published %.5f", c.got, c.published)
			}
		})
	}
}

func TestWaldChi2(t *testing.T) {
	// chi-square(2) survival at 5.991465 is 0.05 (standard table value, e.g.
	// NIST/SEMATECH e-Handbook of Statistical Methods, table 1.3.6.7.4).
	v := mat.NewSymDense(2, []float64{1, 0, 0, 1})
	stat, df, p, ok := robust.WaldChi2([]float64{math.Sqrt(5.991465 / 2), math.Sqrt(5.991465 / 2)}, v)
	if !ok || df != 2 || math.Abs(stat-5.991465) > 1e-9 || math.Abs(p-0.05) > 1e-6 {
		t.Errorf("Wald: stat %v df %d p %v ok %v; want 5.991465, 2, 0.05", stat, df, p, ok)
	}
	if _, _, _, ok := robust.WaldChi2([]float64{1, 1}, mat.NewSymDense(2, []float64{1, 1, 1, 1})); ok {
		t.Error("singular variance accepted")
	}
}

func TestCritical(t *testing.T) {
	// Normal 0.975 robust.Quantile 1.959964 and t(9) 0.975 robust.Quantile 2.262157 (standard tables).
	if c := robust.Critical(40, 100); math.Abs(c-1.959964) > 1e-6 {
		t.Errorf("many clusters: %v", c)
	}
	if c := robust.Critical(5, 10); math.Abs(c-2.262157) > 1e-6 {
		t.Errorf("10 clusters: %v", c)
	}
}

func TestQuantileType7(t *testing.T) {
	// R: robust.Quantile(c(1, 2, 3, 4, 10), 0.95) is 8.8 (type 7, R's default).
	if q := robust.Quantile([]float64{10, 1, 3, 2, 4}, 0.95); math.Abs(q-8.8) > 1e-12 {
		t.Errorf("got %v, want 8.8", q)
	}
}

// The OLS fit below is test support only: it checks robust.SandwichCR1, which the
// linear event study uses, against R on Petersen's data.

// olsFit is a weighted least-squares fit with classic and cluster-robust
// variances.
type olsFit struct {
	beta  []float64
	vOLS  *mat.SymDense // σ²(X'WX)⁻¹
	vCR1  *mat.SymDense // CR1 cluster-robust
	resid []float64
	n, k  int
	g     int // clusters with at least one observation of positive weight
}

// olsCR1 fits y on the columns of x (n×k, already holding any intercept) with
// observation weights w (nil for 1) and returns CR1 variances by cluster
// (cluster[i] in [0, G)). Observations with weight 0 are ignored.
func olsCR1(x *mat.Dense, y, w []float64, cluster []int, G int) (*olsFit, error) {
	n, k := x.Dims()
	xtx := mat.NewSymDense(k, nil)
	xty := make([]float64, k)
	nEff := 0
	for i := 0; i < n; i++ {
		wi := 1.0
		if w != nil {
			wi = w[i]
		}
		if wi == 0 {
			continue
		}
		nEff++
		row := x.RawRowView(i)
		for a := 0; a < k; a++ {
			xty[a] += wi * row[a] * y[i]
			for b := a; b < k; b++ {
				xtx.SetSym(a, b, xtx.At(a, b)+wi*row[a]*row[b])
			}
		}
	}
	if nEff <= k {
		return nil, errSingular
	}
	var inv mat.SymDense
	if err := poisson.InvSym(&inv, xtx); err != nil {
		return nil, err
	}
	beta := make([]float64, k)
	bv := mat.NewVecDense(k, beta)
	bv.MulVec(&inv, mat.NewVecDense(k, xty))
	resid := make([]float64, n)
	ssr := 0.0
	scores := make([]float64, G*k)
	used := make([]bool, G)
	for i := 0; i < n; i++ {
		wi := 1.0
		if w != nil {
			wi = w[i]
		}
		row := x.RawRowView(i)
		fit := 0.0
		for a := 0; a < k; a++ {
			fit += row[a] * beta[a]
		}
		resid[i] = y[i] - fit
		if wi == 0 {
			continue
		}
		ssr += wi * resid[i] * resid[i]
		g := cluster[i]
		used[g] = true
		for a := 0; a < k; a++ {
			scores[g*k+a] += wi * row[a] * resid[i]
		}
	}
	f := &olsFit{beta: beta, resid: resid, n: nEff, k: k}
	f.vOLS = mat.NewSymDense(k, nil)
	f.vOLS.ScaleSym(ssr/float64(nEff-k), &inv)
	f.vCR1, f.g = robust.SandwichCR1(&inv, scores, used, k, nEff, k)
	return f, nil
}
