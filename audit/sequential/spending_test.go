package sequential

import (
	"math"
	"path/filepath"
	"strconv"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/reftest"
)

// TestBoundariesMatchR checks the boundaries against values computed
// independently in R 4.2.2 with mvtnorm 1.1-3's Miwa algorithm
// (testdata/R/boundaries.R made testdata/R/boundaries.csv once).
func TestBoundariesMatchR(t *testing.T) {
	tab := reftest.Load(t, filepath.Join("testdata", "R", "boundaries.csv"))
	byK := map[int][]float64{}
	for _, row := range tab.Rows {
		k, _ := strconv.Atoi(row["k"])
		b, _ := strconv.ParseFloat(row["boundary"], 64)
		byK[k] = append(byK[k], b)
	}
	for k := 2; k <= 5; k++ {
		t.Run(strconv.Itoa(k)+" looks", func(t *testing.T) {
			looks, err := Boundaries(EqualFractions(k), 0.05)
			if err != nil {
				t.Fatal(err)
			}
			for i, l := range looks {
				if d := math.Abs(l.Boundary - byK[k][i]); d > 1e-4 {
					t.Errorf("look %d: boundary %.6f, R (mvtnorm) %.6f", i+1, l.Boundary, byK[k][i])
				}
			}
			if last := looks[k-1].Spent; math.Abs(last-0.05) > 1e-12 {
				t.Errorf("spent %g by the last look, want 0.05", last)
			}
		})
	}
}

// TestFirstLookClosedForm: at the first look the whole spent error is one
// normal tail, so c₁ = z(1 − α/2)/√t₁ exactly (Lan & DeMets 1983's spending
// function at t₁; handbook formula).
func TestFirstLookClosedForm(t *testing.T) {
	for _, tc := range []struct {
		name  string
		t1    float64
		alpha float64
		want  float64
	}{
		{"half at 5%", 0.5, 0.05, 1.959963985 / math.Sqrt(0.5)},
		{"quarter at 5%", 0.25, 0.05, 1.959963985 / 0.5},
		{"third at 1%", 1.0 / 3, 0.01, 2.575829304 / math.Sqrt(1.0/3)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			looks, err := Boundaries([]float64{tc.t1, 1}, tc.alpha)
			if err != nil {
				t.Fatal(err)
			}
			if d := math.Abs(looks[0].Boundary - tc.want); d > 1e-6 {
				t.Errorf("c1 = %.8f, want %.8f", looks[0].Boundary, tc.want)
			}
		})
	}
}

// TestClassicOBFLevel checks the crossing probabilities behind the
// boundaries on the classic O'Brien–Fleming boundaries c_k = C_B √(K/k),
// whose constants C_B(K, α = 0.05) are tabulated in Jennison & Turnbull
// (2000), Table 2.3: 1.977 (K = 2), 2.004 (3), 2.024 (4), 2.040 (5)
// (values from memory of that table, three decimals): the total must be 5%
// to the table's rounding.
func TestClassicOBFLevel(t *testing.T) {
	for _, tc := range []struct {
		k  int
		cb float64
	}{{2, 1.977}, {3, 2.004}, {4, 2.024}, {5, 2.040}} {
		t.Run(strconv.Itoa(tc.k)+" looks", func(t *testing.T) {
			fr := EqualFractions(tc.k)
			b := make([]float64, tc.k)
			for i := range b {
				b[i] = tc.cb * math.Sqrt(float64(tc.k)/float64(i+1))
			}
			total := 0.0
			for _, p := range crossings(fr, b) {
				total += p
			}
			if math.Abs(total-0.05) > 3e-4 {
				t.Errorf("level of C_B = %.3f over %d looks: %.5f, want 0.05", tc.cb, tc.k, total)
			}
		})
	}
}

func TestBoundariesRefuse(t *testing.T) {
	for _, tc := range []struct {
		name  string
		fr    []float64
		alpha float64
	}{
		{"none", nil, 0.05},
		{"not ending at 1", []float64{0.5, 0.9}, 0.05},
		{"decreasing", []float64{0.6, 0.5, 1}, 0.05},
		{"level 0", []float64{0.5, 1}, 0},
		{"level 1", []float64{1}, 1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := Boundaries(tc.fr, tc.alpha); err == nil {
				t.Error("no error")
			}
		})
	}
}
