package retention_test

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/simtest"
	"github.com/loadwake/loadwake/audit/retention"
	"github.com/loadwake/loadwake/audit/sim"
)

// design is a Monte Carlo design of newcomer samples drawn directly from the
// process sim.Retention plants (a faster stand-in for whole worlds): units
// with a normal log frailty of the monthly stop probability, newcomers
// arriving Poisson per unit-month at a uniform time in the month, editing
// monthly until a geometric stop, followed to month 48.
type design struct {
	treated, controls int
	waves             int
	plan              sim.Retention
}

// draw returns one sample: waves start at months 12, 18, ...; each wave's
// import areas and every comparison area count newcomers from 12 months
// before to 24 after the wave's start (stacked, as Scan does).
func (d design) draw(r *rand.Rand) *retention.Sample {
	const months, gap = 48.0, 6
	s := &retention.Sample{Treated: make([][]int, d.waves)}
	for k := 0; k < d.waves; k++ {
		s.Cohorts = append(s.Cohorts, "wave")
	}
	start := func(k int) float64 { return 12 + 6*float64(k) }
	n := d.treated + d.controls
	h := retention.Horizons()
	for u := 0; u < n; u++ {
		cohort, treated := u%d.waves, u < d.treated
		if treated {
			s.Treated[cohort] = append(s.Treated[cohort], u)
		} else {
			s.Controls = append(s.Controls, u)
		}
		frail := d.plan.Frailty * r.NormFloat64()
		for m := 0; m < 48; m++ {
			for range poisson(r, d.plan.PerDistrictMonth) {
				t0 := float64(m) + r.Float64()
				for k := 0; k < d.waves; k++ {
					if treated && k != cohort {
						continue
					}
					if t0 < start(k)-12 || t0 >= start(k)+24 {
						continue
					}
					after := t0 >= start(k)
					p := d.plan.StopMonthly * math.Exp(frail)
					if treated && after {
						p *= d.plan.HazardRatio
					}
					p = math.Min(p, 0.999)
					nc := retention.Newcomer{Cohort: k, Unit: u, Treated: treated, After: after, FirstYearEdits: -1}
					// The same random career in every stack it enters.
					cr := rand.New(rand.NewPCG(uint64(u), math.Float64bits(t0)))
					l := 0
					for cr.Float64() >= p {
						l++
					}
					last := t0 + float64(l)
					if last > months {
						last = t0 + math.Floor(months-t0)
					}
					if months-last > gap {
						nc.Stopped, nc.Months = true, last-t0
					} else {
						nc.Months = months - t0
					}
					for i, hm := range h {
						switch {
						case t0+float64(hm) > months:
							nc.Retained[i] = -1
						case l >= hm:
							nc.Retained[i] = 1
						}
					}
					if t0+12 <= months {
						nc.FirstYearEdits = 0
						for j := 0; j <= min(l, 11); j++ {
							nc.FirstYearEdits += 1 + poisson(cr, d.plan.EditsPerMonth-1)
						}
					}
					s.Newcomers = append(s.Newcomers, nc)
				}
			}
		}
	}
	return s
}

func poisson(r *rand.Rand, l float64) int {
	// Knuth's method; l is small here.
	k, p, e := 0, 1.0, math.Exp(-l)
	for {
		p *= r.Float64()
		if p <= e {
			return k
		}
		k++
	}
}

// mcResult counts one design's Monte Carlo outcomes.
type mcResult struct {
	runs, covered, coxReject, logRankReject int
	sum                                     float64
}

func runDesign(tb testing.TB, d design, reps, draws int) mcResult {
	tb.Helper()
	var res mcResult
	want := d.plan.PlantedDiD(12)
	for rep := 0; rep < reps; rep++ {
		s := d.draw(rand.New(rand.NewPCG(uint64(rep)+1, 99)))
		r, err := retention.Estimate(context.Background(), s, retention.Options{Draws: draws, Seed: uint64(rep) + 1})
		if err != nil {
			tb.Fatal(err)
		}
		e := r.Retention12
		if !e.Computed || e.NoInterval {
			continue
		}
		res.runs++
		res.sum += e.Estimate
		if e.CI95[0] <= want && want <= e.CI95[1] {
			res.covered++
		}
		if r.HazardRatio.Computed && r.HazardRatio.P < 0.05 {
			res.coxReject++
		}
		if r.LogRank.Computed && r.LogRank.P < 0.05 {
			res.logRankReject++
		}
	}
	return res
}

// mcDesigns are the Monte Carlo designs: few (6) and many (24) import areas,
// null and planted (hazard ratio 1.6).
func mcDesigns() []struct {
	name string
	d    design
} {
	plan := sim.DefaultRetention()
	null := plan
	null.HazardRatio = 1
	return []struct {
		name string
		d    design
	}{
		{"few planted", design{treated: 6, controls: 18, waves: 2, plan: plan}},
		{"few null", design{treated: 6, controls: 18, waves: 2, plan: null}},
		{"many planted", design{treated: 24, controls: 48, waves: 3, plan: plan}},
		{"many null", design{treated: 24, controls: 48, waves: 3, plan: null}},
	}
}

// TestCoverageQuick is the quick version of the coverage and size study (the
// long one, with the validate tag, in mc_validate_test.go): 40 samples per
// design with few import areas, 12 with many, 199 draws; it fails only on
// gross miscoverage.
func TestCoverageQuick(t *testing.T) {
	if simtest.Validate {
		t.Skip("the validate study runs the long version")
	}
	for _, tc := range mcDesigns() {
		t.Run(tc.name, func(t *testing.T) {
			reps := 40
			if tc.d.treated > 12 {
				reps = 12
			}
			res := runDesign(t, tc.d, reps, 199)
			t.Logf("planted %+.3f: coverage %s, mean estimate %+.3f, Cox rejects %s, log-rank rejects %s",
				tc.d.plan.PlantedDiD(12), simtest.Rate(res.covered, res.runs), res.sum/float64(res.runs),
				simtest.Rate(res.coxReject, res.runs), simtest.Rate(res.logRankReject, res.runs))
			if res.runs < reps*9/10 || res.covered < res.runs*3/4 {
				t.Errorf("coverage %d of %d samples", res.covered, res.runs)
			}
		})
	}
}
