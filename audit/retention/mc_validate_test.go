//go:build validate

package retention_test

import (
	"testing"

	"github.com/loadwake/loadwake/audit/internal/simtest"
)

// TestCoverageStudy is the coverage and size study of the 12-month
// difference-in-differences and its cluster bootstrap interval (999 draws),
// 400 samples per design (mcDesigns: 6 or 24 import areas, null or a planted
// hazard ratio of 1.6). Targets: coverage 93% to 97% where an effect is
// planted, rejection of the true zero at most 6% on null designs (the
// Wilson 95% interval of the measured rate must reach the target band). The
// Cox robust test's size is held to the same 6%; the log-rank test, which
// ignores clustering by unit, is measured and reported only.
func TestCoverageStudy(t *testing.T) {
	const reps = 400
	for _, tc := range mcDesigns() {
		t.Run(tc.name, func(t *testing.T) {
			res := runDesign(t, tc.d, reps, 999)
			lo, hi := simtest.Wilson(res.covered, res.runs)
			t.Logf("%s: planted %+.3f, coverage %s, mean estimate %+.4f, Cox rejects %s, log-rank rejects %s (%d samples)",
				tc.name, tc.d.plan.PlantedDiD(12), simtest.Rate(res.covered, res.runs), res.sum/float64(res.runs),
				simtest.Rate(res.coxReject, res.runs), simtest.Rate(res.logRankReject, res.runs), res.runs)
			if res.runs < reps*9/10 {
				t.Fatalf("only %d of %d samples gave an interval", res.runs, reps)
			}
			if tc.d.plan.HazardRatio == 1 {
				if size := 1 - hi; size > 0.06 {
					t.Errorf("size of the difference's interval: %d of %d reject, Wilson lower bound %.3f above 0.06", res.runs-res.covered, res.runs, size)
				}
				if clo, _ := simtest.Wilson(res.coxReject, res.runs); clo > 0.06 {
					t.Errorf("size of the Cox robust test: %s, above 0.06", simtest.Rate(res.coxReject, res.runs))
				}
				return
			}
			if hi < 0.93 || lo > 0.97 {
				t.Errorf("coverage %s, want 93%% to 97%%", simtest.Rate(res.covered, res.runs))
			}
		})
	}
}
