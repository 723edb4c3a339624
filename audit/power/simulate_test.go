package power

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/panel"
)

// historyPanel invents a history of n units over T months, every layer
// Poisson around level·(1 + u mod 3).
func historyPanel(tb testing.TB, n, T int, level float64, seed uint64) *panel.Panel {
	tb.Helper()
	rng := rand.New(rand.NewPCG(seed, 1))
	p := &panel.Panel{Start: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC), Months: T, Outcomes: Layers}
	for u := range n {
		p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("u%d", u), FirstTreated: -1, Weight: 1})
	}
	for range Layers {
		y := make([]float64, n*T)
		for u := range n {
			for t := range T {
				y[u*T+t] = poissonQuantile(level*float64(1+u%3), rng.Float64())
			}
		}
		p.Y = append(p.Y, y)
	}
	return p
}

// plainAssign deals units to waves in equal shares by a seeded random
// permutation, without regard to activity (as sim draws its treated
// districts with LevelSelection 0 and deals them to cohorts).
func plainAssign(units []int, waves int, seed uint64) ([]int, error) {
	rng := rand.New(rand.NewPCG(seed, 2))
	out := make([]int, len(units))
	for i, j := range rng.Perm(len(units)) {
		out[j] = i % waves
	}
	return out, nil
}

// TestSimulateDetects: on busy invented units, the planted halving is found
// in nearly every world and no effect in few; the curve's minimum detectable
// fall lies between the simulated effects. A quick check of the machinery;
// the calibration against audit/sim worlds is behind the validate tag.
func TestSimulateDetects(t *testing.T) {
	m, err := Fit(historyPanel(t, 24, 24, 6, 1))
	if err != nil {
		t.Fatal(err)
	}
	d := Design{Name: "plan", Waves: 3, MonthsBetween: 4, FollowUp: 4, Before: 8, Layers: []string{"attribute"}}
	r, err := Simulate(context.Background(), m, []Design{d}, plainAssign, Options{Worlds: 6, Effects: []float64{-0.5, 0}, Draws: 99})
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Curves) != 1 {
		t.Fatalf("%d curves, want 1 (one layer of one design)", len(r.Curves))
	}
	c := r.Curves[0]
	if c.Points[0].Detected < 5 {
		t.Errorf("halving detected in %d of 6 worlds, want at least 5", c.Points[0].Detected)
	}
	if c.Points[1].Detected > 2 {
		t.Errorf("no effect detected in %d of 6 worlds, want at most 2", c.Points[1].Detected)
	}
	if c.MDEFall == nil || *c.MDEFall > 0 || *c.MDEFall < -0.5 {
		t.Errorf("minimum detectable fall %v, want within (-50%%, 0)", c.MDEFall)
	}
	if math.Abs(r.MCError-math.Sqrt(0.25/6)) > 1e-12 {
		t.Errorf("Monte Carlo error %g", r.MCError)
	}
}

func TestMDEInterpolates(t *testing.T) {
	pts := []Point{{Effect: -0.5, Power: 1}, {Effect: math.Expm1(-0.3), Power: 0.6}, {Effect: 0, Power: 0.05}, {Effect: 0.5, Power: 0.7}}
	fall, rise := mde(pts, 0.8)
	// Between log points 0.3 (power 0.6) and 0.693 (power 1): halfway.
	want := math.Expm1(-(0.3 + 0.5*(math.Log(2)-0.3)))
	if fall == nil || math.Abs(*fall-want) > 1e-9 {
		t.Errorf("fall %v, want %.6f", fall, want)
	}
	if rise != nil {
		t.Errorf("rise %v, want none (0.7 < 0.8)", *rise)
	}
}

func TestDesignMonths(t *testing.T) {
	d := Design{Waves: 4, MonthsBetween: 3, FollowUp: 5, Before: 12}
	for _, tc := range []struct{ wave, start int }{{0, 12}, {1, 15}, {2, 18}, {3, 23}} {
		if got := d.WaveStart(tc.wave); got != tc.start {
			t.Errorf("wave %d starts at %d, want %d", tc.wave, got, tc.start)
		}
	}
	if d.Months() != 23 {
		t.Errorf("months %d, want 23 (12 before, two gaps of 3, 5 of follow-up)", d.Months())
	}
}
