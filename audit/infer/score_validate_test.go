//go:build validate

package infer

import "testing"

// TestScoreSimulationValidate is the full size and coverage study of the
// restricted score bootstrap on invented Poisson panels (scoreSimPanel):
// 2, 4, 8 and 40 treated clusters among 10 to 120, 1000 panels each, 999
// draws, automatic and Webb weights.
// It logs each figure with its Wilson 95% interval and fails when the
// interval of the rejection rate lies wholly above 7.5% (over-rejection) or
// coverage and non-rejection disagree. Run: go test -tags validate -run
// ScoreSimulationValidate -v ./audit/infer
func TestScoreSimulationValidate(t *testing.T) {
	tests := []struct {
		name     string
		g, nt, T int
		reps     int
		w        ScoreWeights
	}{
		{"4 of 40", 40, 4, 8, 1000, ScoreWeightsAuto},
		{"8 of 40", 40, 8, 8, 1000, ScoreWeightsAuto},
		{"4 of 120", 120, 4, 8, 1000, ScoreWeightsAuto},
		{"40 of 120", 120, 40, 8, 1000, ScoreWeightsAuto},
		{"40 of 80", 80, 40, 8, 1000, ScoreWeightsAuto},
		{"4 of 40, Webb", 40, 4, 8, 1000, ScoreWebb},
		{"8 of 40, Webb", 40, 8, 8, 1000, ScoreWebb},
		{"4 of 120, Webb", 120, 4, 8, 1000, ScoreWebb},
		{"8 of 120", 120, 8, 8, 1000, ScoreWeightsAuto},
		{"2 of 40", 40, 2, 8, 1000, ScoreWeightsAuto},
		{"8 of 10 (Webb by G)", 10, 8, 8, 1000, ScoreWeightsAuto},
	}
	for i, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := scoreSimStudy(t, uint64(100+i), tc.reps, tc.g, tc.nt, tc.T, 999, tc.w)
			lo, hi := scoreWilson(r.rejected, r.reps)
			clo, chi := scoreWilson(r.covered, r.reps)
			wlo, whi := scoreWilson(r.wald, r.reps)
			t.Logf("| %s | %d | size %.3f [%.3f, %.3f] | coverage %.3f [%.3f, %.3f] | CR1 Wald t(G-1) size %.3f [%.3f, %.3f] | unbounded %d (fit failed %d) |",
				tc.name, r.reps, float64(r.rejected)/float64(r.reps), lo, hi,
				float64(r.covered)/float64(r.reps), clo, chi, float64(r.wald)/float64(r.reps), wlo, whi, r.unbounded, r.fitFailed)
			if lo > 0.075 {
				t.Errorf("over-rejects: %d/%d", r.rejected, r.reps)
			}
			if d := r.covered - (r.reps - r.rejected); d < -5 || d > 5 {
				t.Errorf("coverage %d, non-rejections %d", r.covered, r.reps-r.rejected)
			}
		})
	}
}
