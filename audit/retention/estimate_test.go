package retention

import (
	"context"
	"errors"
	"math"
	"testing"
)

// handSample has one wave, import areas 0-3 and comparison areas 4-7; in
// each unit, before: 4 newcomers of whom `kb` stay a year; after: 4 of whom
// `ka` stay.
func handSample(treated, controls int, kb, ka func(u int) int) *Sample {
	s := &Sample{Cohorts: []string{"2020-01"}, Treated: [][]int{nil}}
	for u := 0; u < treated+controls; u++ {
		tr := u < treated
		if tr {
			s.Treated[0] = append(s.Treated[0], u)
		} else {
			s.Controls = append(s.Controls, u)
		}
		for _, after := range []bool{false, true} {
			k := kb(u)
			if after {
				k = ka(u)
			}
			for i := 0; i < 4; i++ {
				n := Newcomer{Unit: u, Treated: tr, After: after, FirstYearEdits: 5 + u, Stopped: true, Months: float64(2 + i + u%3)}
				if i < k {
					n.Retained = [NumHorizons]int8{1, 1, 1, 0}
					n.Months += 12
				}
				s.Newcomers = append(s.Newcomers, n)
			}
		}
	}
	return s
}

// TestEstimateByHand checks the difference-in-differences against the cell
// shares worked out by hand, and the intervals' few-unit rule.
func TestEstimateByHand(t *testing.T) {
	// Import areas: before 2 of 4 stay, after 1 of 4; comparison: 2 of 4 and 3 of 4 in
	// units 4-5, 2 of 4 both times in 6-7. Shares: import 0.5 -> 0.25;
	// comparison 0.5 -> 10/16. Difference: -0.25 - 0.125 = -0.375.
	kb := func(u int) int { return 2 }
	ka := func(u int) int {
		switch {
		case u < 4:
			return 1
		case u < 6:
			return 3
		}
		return 2
	}
	r, err := Estimate(context.Background(), handSample(4, 4, kb, ka), Options{Draws: 199})
	if err != nil {
		t.Fatal(err)
	}
	e := r.Retention12
	if !e.Computed || e.NoInterval || math.Abs(e.Estimate-(-0.375)) > 1e-12 {
		t.Fatalf("difference %+v, want -0.375 with an interval (by hand)", e)
	}
	if math.Abs((e.CI95[0]+e.CI95[1])/2-e.Estimate) > 1e-12 || !(e.CI95[0] < e.Estimate) {
		t.Errorf("interval %v is not centred on %v", e.CI95, e.Estimate)
	}
	// First-year edits: unit u's newcomers make 5+u edits. Import 6.5 both
	// times; comparison 10.5 both times: difference 0.
	if f := r.FirstYearEdits; math.Abs(f.Estimate) > 1e-12 {
		t.Errorf("first-year edits difference %v, want 0 (by hand)", f.Estimate)
	}
	for _, g := range r.Groups {
		if g.Newcomers != 16 || g.Retention[2].Followed != 16 {
			t.Errorf("group %s %s: %d newcomers, %d followed", g.Areas, g.Period, g.Newcomers, g.Retention[2].Followed)
		}
	}

	few, err := Estimate(context.Background(), handSample(3, 4, kb, ka), Options{Draws: 199})
	if err != nil {
		t.Fatal(err)
	}
	if !few.Retention12.NoInterval || few.Retention12.CI95[0] != few.Retention12.Estimate {
		t.Errorf("3 import areas: %+v, want no interval", few.Retention12)
	}
}

func TestEstimateRefusesEmpty(t *testing.T) {
	if _, err := Estimate(context.Background(), &Sample{}, Options{}); !errors.Is(err, ErrRetention) {
		t.Errorf("empty sample: %v, want ErrRetention", err)
	}
}
