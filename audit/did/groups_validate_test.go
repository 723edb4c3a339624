//go:build validate

package did

import (
	"testing"

	"github.com/loadwake/loadwake/audit/internal/simtest"
)

// TestSplitValidate is the simulation study of EstimateByGroups (go test
// -tags validate): 200 invented panels per design, with few (4 per group)
// and many (16 per group) treated units. Where the planted effect differs by
// the trait (−30% and +10%), each group's 95% interval should hold its
// planted value about 95% of the time; where it does not (−20% in both), the
// interaction test should reject at most 6% of the time. Shares with Wilson
// 95% intervals are logged for the closing notes.
func TestSplitValidate(t *testing.T) {
	const n = 200
	for _, c := range []struct {
		name   string
		w      splitWorld
		isNull bool
	}{
		{"differ, 4 treated per group", splitWorld{PerGroup: 4, Controls: 24, Months: 30, Deltas: []float64{-0.3, 0.1}, K: 8}, false},
		{"differ, 16 treated per group", splitWorld{PerGroup: 16, Controls: 48, Months: 30, Deltas: []float64{-0.3, 0.1}, K: 8}, false},
		{"null, 4 treated per group", splitWorld{PerGroup: 4, Controls: 24, Months: 30, Deltas: []float64{-0.2, -0.2}, K: 8}, true},
		{"null, 16 treated per group", splitWorld{PerGroup: 16, Controls: 48, Months: 30, Deltas: []float64{-0.2, -0.2}, K: 8}, true},
	} {
		t.Run(c.name, func(t *testing.T) {
			cover, reject, tested := splitStudy(t, c.w, n, 199)
			for k := range cover {
				t.Logf("%s: group %c (planted %+.2f) covered in %s", c.name, 'a'+k, c.w.Deltas[k], simtest.Rate(cover[k], n))
			}
			t.Logf("%s: difference test rejects at 5%% in %s of %d tested", c.name, simtest.Rate(reject, tested), tested)
			if tested != n {
				t.Errorf("%d of %d panels tested", tested, n)
			}
			if c.isNull { // fails when the Wilson interval lies wholly above 6%
				if lo, _ := simtest.Wilson(reject, tested); lo > 0.06 {
					t.Errorf("size %s: above 6%%", simtest.Rate(reject, tested))
				}
				return
			}
			for k := range cover {
				if _, hi := simtest.Wilson(cover[k], n); hi < 0.95 {
					t.Errorf("group %c coverage %s: below 95%%", 'a'+k, simtest.Rate(cover[k], n))
				}
			}
		})
	}
}
