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

// plainAssign deals units to waves by a seeded permutation, equal sizes.
func plainAssign(units []int, waves int, seed uint64) ([]int, error) {
	rng := rand.New(rand.NewPCG(seed, 2))
	out := make([]int, len(units))
	for i, j := range rng.Perm(len(units)) {
		out[j] = i % waves
	}
	return out, nil
}

func TestSimulateSpeedProbe(t *testing.T) {
	m, err := Fit(historyPanel(t, 30, 24, 3, 1))
	if err != nil {
		t.Fatal(err)
	}
	d := Design{Name: "plan", Waves: 3, MonthsBetween: 6, FollowUp: 6, Before: 12}
	start := time.Now()
	r, err := Simulate(context.Background(), m, []Design{d}, plainAssign, Options{Worlds: 8, Effects: []float64{-0.3, 0, 0.3}})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("%v for %d worlds x 3 effects", time.Since(start), 8)
	for _, c := range r.Curves {
		t.Logf("%s %+v", c.Layer, c.Points)
	}
	_ = math.Abs
}
