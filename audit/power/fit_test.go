package power

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/panel"
)

// TestFitRecoversPlantedActivity plants levels, a seasonal profile, a trend
// and negative binomial dispersion in an invented history and checks that Fit
// finds them: the planted truth of invented data, the project's check for a
// model fitted on simulations.
func TestFitRecoversPlantedActivity(t *testing.T) {
	const n, T = 200, 48
	const trend, disp = 0.01, 0.5
	season := [12]float64{1.3, 1.2, 1.1, 1, 0.9, 0.8, 0.7, 0.8, 0.9, 1, 1.1, 1.2}
	rng := rand.New(rand.NewPCG(7, 7))
	p := &panel.Panel{Start: time.Date(2019, 1, 1, 0, 0, 0, 0, time.UTC), Months: T, Outcomes: []string{"attribute"}}
	y := make([]float64, n*T)
	level := make([]float64, n)
	g := distuv.Gamma{Alpha: 1 / disp, Beta: 1 / disp, Src: rng}
	for u := range n {
		level[u] = 2 + float64(u%5)
		p.Units = append(p.Units, panel.Unit{ID: string(rune('a' + u%26)), FirstTreated: -1, Weight: 1})
		for tt := range T {
			mu := level[u] * season[tt%12] * math.Exp(trend*float64(tt-(T-1)/2))
			y[u*T+tt] = poissonQuantile(mu*g.Rand(), rng.Float64())
		}
	}
	p.Y = [][]float64{y}
	m, err := Fit(p)
	if err != nil {
		t.Fatal(err)
	}
	f := m.Layers[0]
	t.Run("trend", func(t *testing.T) {
		if math.Abs(f.Trend-trend) > 0.003 {
			t.Errorf("trend %.4f, planted %.4f", f.Trend, trend)
		}
	})
	t.Run("season", func(t *testing.T) {
		for i, s := range season {
			if math.Abs(f.Season[i]-s) > 0.08 {
				t.Errorf("month %d: factor %.3f, planted %.3f", i+1, f.Season[i], s)
			}
		}
	})
	t.Run("dispersion", func(t *testing.T) {
		if math.Abs(f.Dispersion-disp) > 0.08 {
			t.Errorf("dispersion %.3f, planted %.3f", f.Dispersion, disp)
		}
	})
	t.Run("levels", func(t *testing.T) {
		mean := 0.0
		for u := range n {
			// Planted at the history's centre, fitted at its last month.
			mean += f.Level[u] / (level[u] * math.Exp(trend*float64(T-1-(T-1)/2))) / n
		}
		if math.Abs(mean-1) > 0.05 {
			t.Errorf("fitted over planted level: mean ratio %.3f", mean)
		}
	})
}

// TestFitNoTrendFromShortHistory: eight months of a rising seasonal cycle
// give no trend (it cannot be told from the season with under two years).
func TestFitNoTrendFromShortHistory(t *testing.T) {
	p := &panel.Panel{Start: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC), Months: 8, Outcomes: []string{"attribute"}}
	y := make([]float64, 0, 8)
	for m := range 8 {
		y = append(y, math.Round(10*math.Exp(0.3*math.Sin(2*math.Pi*float64(m-3)/12))))
	}
	p.Units = []panel.Unit{{ID: "a", FirstTreated: -1, Weight: 1}}
	p.Y = [][]float64{y}
	m, err := Fit(p)
	if err != nil {
		t.Fatal(err)
	}
	if m.Layers[0].Trend != 0 {
		t.Errorf("trend %.4f from 8 months, want 0", m.Layers[0].Trend)
	}
}

func TestFitRefuses(t *testing.T) {
	for _, tc := range []struct {
		name string
		p    *panel.Panel
	}{
		{"nil", nil},
		{"one month", &panel.Panel{Months: 1, Units: []panel.Unit{{ID: "a"}}, Outcomes: []string{"x"}, Y: [][]float64{{1}}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := Fit(tc.p); err == nil {
				t.Error("no error")
			}
		})
	}
}

func TestPoissonQuantile(t *testing.T) {
	for _, tc := range []struct {
		name string
		mu   float64
	}{{"small", 0.7}, {"medium", 12}, {"large", 900}} {
		t.Run(tc.name, func(t *testing.T) {
			d := distuv.Poisson{Lambda: tc.mu}
			for _, u := range []float64{0.05, 0.3, 0.5, 0.8, 0.97} {
				k := poissonQuantile(tc.mu, u)
				// gonum's Poisson CDF is the reference: k is the smallest
				// count whose CDF reaches u (normal approximation above 500
				// means: within one count).
				tol := 0.0
				if tc.mu > 500 {
					tol = 1
				}
				if d.CDF(k+tol) < u || (k-1-tol >= 0 && d.CDF(k-1-tol) >= u) {
					t.Errorf("mu %g, u %g: quantile %g; CDF(k) %.4f CDF(k-1) %.4f", tc.mu, u, k, d.CDF(k), d.CDF(k-1))
				}
			}
		})
	}
}
