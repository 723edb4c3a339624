// Package paneltest makes small invented panels for tests of the estimators
// and the panel's readers: Poisson counts with a planted effect, nothing from
// real data.
package paneltest

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/panel"
)

// World describes a small invented world for the Monte Carlo checks:
// counts are Poisson with a gamma-distributed unit level (mean 5, shape 2),
// a seasonal month effect, and a planted multiplicative effect (1+Delta) from
// each treated unit's first treated month. Trend adds a treated-only linear
// drift (1 + Trend·t) that breaks parallel trends.
type World struct {
	PerCohort int
	Cohorts   []int
	Controls  int
	Months    int
	Delta     float64
	Trend     float64
	Outcomes  int
}

// Panel draws the panel of seed; the same seed gives the same panel.
func (w World) Panel(seed uint64) *panel.Panel {
	rng := rand.New(rand.NewPCG(seed, 99))
	gam := distuv.Gamma{Alpha: 2, Beta: 0.4, Src: rng}
	p := &panel.Panel{Start: time.Date(2031, 1, 1, 0, 0, 0, 0, time.UTC), Months: w.Months}
	for o := range max(1, w.Outcomes) {
		p.Outcomes = append(p.Outcomes, fmt.Sprintf("layer%d", o))
	}
	var levels []float64
	for _, g := range w.Cohorts {
		for range w.PerCohort {
			p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("t%d", len(p.Units)), FirstTreated: g, Weight: 1})
			levels = append(levels, gam.Rand())
		}
	}
	for range w.Controls {
		p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("c%d", len(p.Units)), FirstTreated: -1, Weight: 1})
		levels = append(levels, gam.Rand())
	}
	p.Y = make([][]float64, len(p.Outcomes))
	for o := range p.Y {
		y := make([]float64, len(p.Units)*w.Months)
		for u, un := range p.Units {
			for t := range w.Months {
				lam := levels[u] * (1 + 0.3*math.Sin(2*math.Pi*float64(t)/12))
				if un.Treated() {
					lam *= 1 + w.Trend*float64(t)
					if t >= un.FirstTreated {
						lam *= 1 + w.Delta
					}
				}
				y[u*w.Months+t] = distuv.Poisson{Lambda: lam, Src: rng}.Rand()
			}
		}
		p.Y[o] = y
	}
	return p
}
