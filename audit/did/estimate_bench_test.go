package did

import (
	"context"
	"math/rand/v2"
	"testing"

	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/panel/paneltest"
)

// benchPanel is an invented world of 2,000 units (24 cohorts of 42 treated
// units between months 12 and 58, 992 never-treated controls) x 72 months x
// 4 outcomes, +20% planted.
func benchPanel(b *testing.B) *panel.Panel {
	b.Helper()
	var cohorts []int
	for g := 12; g < 60; g += 2 {
		cohorts = append(cohorts, g)
	}
	w := paneltest.World{PerCohort: 42, Cohorts: cohorts, Controls: 2000 - 42*len(cohorts), Months: 72, Delta: 0.2, Outcomes: 4}
	return w.Panel(42)
}

func benchOpts() Options {
	o := DefaultOptions()
	o.Inference = InferenceBootstrap // bootstrap everywhere it applies, 999 draws
	return o
}

// BenchmarkEstimate is the full Estimate: every estimator, event studies,
// pre-trend tests and placebo for 4 outcomes with 999 bootstrap draws.
func BenchmarkEstimate(b *testing.B) {
	p := benchPanel(b)
	opts := benchOpts()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Estimate(context.Background(), p, opts); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(p.Units)*p.Months*len(p.Outcomes))*float64(b.N)/b.Elapsed().Seconds(), "unit-months/s")
}

// BenchmarkEstimators times each estimator on one outcome.
func BenchmarkEstimators(b *testing.B) {
	p := benchPanel(b)
	opts := benchOpts()
	cl, G := p.ClusterIndex()
	y := p.Y[0]
	rng := rand.New(rand.NewPCG(1, 1))
	cells := float64(len(p.Units) * p.Months)
	run := func(name string, f func() error) {
		b.Run(name, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if err := f(); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(cells*float64(b.N)/b.Elapsed().Seconds(), "unit-months/s")
		})
	}
	run(EstimatorCS, func() error {
		_, err := callawaySantAnna(p, y, cl, G, opts, rng, false)
		return err
	})
	run(EstimatorPPML, func() error {
		_, err := stackedPPML(context.Background(), p, y, cl, G, opts, rng)
		return err
	})
	run(EstimatorTWFELinear, func() error {
		d, err := newESDesign(p, opts.Window)
		if err != nil {
			return err
		}
		_, err = twfeEventStudy(context.Background(), d, y, cl, G, opts, rng)
		return err
	})
	run(EstimatorDiD2x2, func() error {
		_, err := did2x2(context.Background(), p, y, cohortsWithPre(p), cl, G, opts, rng)
		return err
	})
	run("placebo", func() error {
		_, err := placeboCS(p, y, cl, G, opts, rng)
		return err
	})
}
