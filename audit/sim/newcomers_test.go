package sim

import (
	"errors"
	"math"
	"testing"
)

// TestRetentionPlanted checks the planted shares: without frailty a newcomer
// still edits k months on with probability (1 − h)^k (the geometric
// distribution's survival), and the difference is zero when the hazard
// ratio is 1.
func TestRetentionPlanted(t *testing.T) {
	r := Retention{PerDistrictMonth: 1, StopMonthly: 0.1, HazardRatio: 1.5, EditsPerMonth: 1}
	for _, k := range []int{3, 12, 24} {
		if got, want := r.RetainedShare(k, false), math.Pow(0.9, float64(k)); math.Abs(got-want) > 1e-12 {
			t.Errorf("k=%d: %v, want %v", k, got, want)
		}
		if got, want := r.RetainedShare(k, true), math.Pow(0.85, float64(k)); math.Abs(got-want) > 1e-12 {
			t.Errorf("k=%d after: %v, want %v", k, got, want)
		}
	}
	r.Frailty, r.HazardRatio = 0.3, 1
	if d := r.PlantedDiD(12); d != 0 {
		t.Errorf("hazard ratio 1 plants %v", d)
	}
	// Frailty: by Jensen's inequality E[(1−h)^k] exceeds (1−E h)^k here.
	if r.RetainedShare(12, false) <= math.Pow(1-0.1*math.Exp(0.045), 12) {
		t.Error("frailty should raise the mean share above the share at the mean hazard")
	}
}

func TestRetentionValidate(t *testing.T) {
	tests := []struct {
		name string
		mod  func(*Retention)
	}{
		{"stop 0", func(r *Retention) { r.StopMonthly = 0 }},
		{"stop 1", func(r *Retention) { r.StopMonthly = 1 }},
		{"hazard ratio pushes stop to 1", func(r *Retention) { r.HazardRatio = 20 }},
		{"negative newcomers", func(r *Retention) { r.PerDistrictMonth = -1 }},
		{"NaN frailty", func(r *Retention) { r.Frailty = math.NaN() }},
		{"edits below 1", func(r *Retention) { r.EditsPerMonth = 0.5 }},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cfg := DefaultConfig()
			r := DefaultRetention()
			tc.mod(&r)
			cfg.Retention = &r
			if err := cfg.Validate(); !errors.Is(err, ErrConfig) {
				t.Errorf("got %v, want ErrConfig", err)
			}
		})
	}
	cfg := DefaultConfig()
	r := DefaultRetention()
	cfg.Retention = &r
	if err := cfg.Validate(); err != nil {
		t.Errorf("default plan: %v", err)
	}
}
