package survival

import (
	"context"
	"errors"
	"math"
	"testing"
)

// TestSurvivalInputErrors: bad input is an error naming the problem, never a
// panic.
func TestSurvivalInputErrors(t *testing.T) {
	tests := []struct {
		name string
		run  func() error
	}{
		{"lengths", func() error { _, err := KaplanMeier([]float64{1, 2}, []bool{true}); return err }},
		{"negative time", func() error { _, err := KaplanMeier([]float64{-1}, []bool{true}); return err }},
		{"NaN time", func() error { _, err := KaplanMeier([]float64{math.NaN()}, []bool{true}); return err }},
		{"log-rank one group", func() error {
			_, err := LogRank([]float64{1, 2}, []bool{true, true}, []bool{false, false}, nil)
			return err
		}},
		{"cox no covariates", func() error {
			_, err := Cox(context.Background(), CoxData{Time: []float64{1}, Event: []bool{true}}, CoxOptions{})
			return err
		}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if err := tc.run(); !errors.Is(err, ErrInput) {
				t.Errorf("got %v, want ErrInput", err)
			}
		})
	}
}
