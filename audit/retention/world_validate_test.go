//go:build validate

package retention_test

import (
	"fmt"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/simtest"
)

// TestWorldStudy runs the whole path — invented world, store, classification,
// import detection, matched study, newcomers, estimate — on 200 small worlds
// with the Retention plan (retentionWorld: 6 of 25 districts treated in one
// wave), 100 with a planted hazard ratio of 1.6 and 100 null, and counts how
// often the 12-month difference's interval covers the planted value
// (sim.Retention.PlantedDiD). Targets as in TestCoverageStudy: the Wilson
// 95% interval of the coverage must reach 93% to 97% on planted worlds, and
// of the rejection rate reach 6% or less on null worlds. The arms are
// subtests (hr1.6, hr1.0), so they can run apart.
func TestWorldStudy(t *testing.T) {
	const worlds = 100
	for _, hr := range []float64{1.6, 1} {
		t.Run(fmt.Sprintf("hr%.1f", hr), func(t *testing.T) {
			covered, ran, sum, coxReject := 0, 0, 0.0, 0
			var want float64
			for seed := 1; seed <= worlds; seed++ {
				cfg := retentionWorld(uint64(seed)+1000, hr)
				want = cfg.Retention.PlantedDiD(12)
				t.Run(fmt.Sprintf("seed%d", seed), func(t *testing.T) {
					_, _, r := runWorld(t, cfg, 199)
					e := r.Retention12
					if !e.Computed || e.NoInterval {
						t.Skipf("no interval: %v", r.Notes)
					}
					ran++
					sum += e.Estimate
					if e.CI95[0] <= want && want <= e.CI95[1] {
						covered++
					}
					if r.HazardRatio.Computed && r.HazardRatio.P < 0.05 {
						coxReject++
					}
				})
				if seed%10 == 0 {
					t.Logf("after %d worlds: %d of %d covered, Cox rejects %d", seed, covered, ran, coxReject)
				}
			}
			lo, hi := simtest.Wilson(covered, ran)
			t.Logf("hazard ratio %.1f: planted %+.3f, coverage %s, mean estimate %+.4f, Cox rejects %s (%d of %d worlds gave an interval)",
				hr, want, simtest.Rate(covered, ran), sum/float64(max(ran, 1)), simtest.Rate(coxReject, ran), ran, worlds)
			switch {
			case ran < worlds*9/10:
				t.Errorf("only %d of %d worlds gave an interval", ran, worlds)
			case hr == 1 && 1-hi > 0.06:
				t.Errorf("null worlds: %d of %d reject, above 6%%", ran-covered, ran)
			case hr != 1 && (hi < 0.93 || lo > 0.97):
				t.Errorf("coverage %s, want 93%% to 97%%", simtest.Rate(covered, ran))
			}
		})
	}
}
