package survival

import (
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// LogRankResult is the log-rank comparison of two groups.
type LogRankResult struct {
	Observed [2]float64 // events in group false (0) and true (1)
	Expected [2]float64 // expected under equal hazards, summed over strata
	Variance float64    // hypergeometric variance of Observed[1]-Expected[1]
	ChiSq    float64    // (O1-E1)²/V, 1 degree of freedom
	P        float64
}

// LogRank tests equal hazards in two groups (the Mantel–Haenszel log-rank
// test). With strata (nil: one stratum) the observed-minus-expected counts and
// their variances are summed over strata, as R's survdiff with strata() does.
func LogRank(time []float64, event, group []bool, strata []int) (LogRankResult, error) {
	var r LogRankResult
	n := len(time)
	if len(event) != n || len(group) != n || (strata != nil && len(strata) != n) {
		return r, fmt.Errorf("%w: columns of different lengths", ErrInput)
	}
	if err := checkTimes(time); err != nil {
		return r, err
	}
	for _, idx := range byStratum(strata, n) {
		idx = sortedBy(time, idx)
		var atRisk, atRisk1 int
		atRisk = len(idx)
		for _, j := range idx {
			if group[j] {
				atRisk1++
			}
		}
		for i := 0; i < len(idx); {
			t := time[idx[i]]
			d, d1, leave, leave1 := 0, 0, 0, 0
			k := i
			for ; k < len(idx) && time[idx[k]] == t; k++ {
				j := idx[k]
				leave++
				if group[j] {
					leave1++
				}
				if event[j] {
					d++
					if group[j] {
						d1++
					}
				}
			}
			if d > 0 {
				nn, n1 := float64(atRisk), float64(atRisk1)
				e1 := float64(d) * n1 / nn
				r.Observed[1] += float64(d1)
				r.Observed[0] += float64(d - d1)
				r.Expected[1] += e1
				r.Expected[0] += float64(d) - e1
				if atRisk > 1 {
					r.Variance += float64(d) * (n1 / nn) * (1 - n1/nn) * (nn - float64(d)) / (nn - 1)
				}
			}
			atRisk -= leave
			atRisk1 -= leave1
			i = k
		}
	}
	if r.Variance <= 0 {
		return r, fmt.Errorf("%w: no events with both groups at risk", ErrInput)
	}
	diff := r.Observed[1] - r.Expected[1]
	r.ChiSq = diff * diff / r.Variance
	r.P = distuv.ChiSquared{K: 1}.Survival(r.ChiSq)
	if math.IsNaN(r.P) {
		r.P = 1
	}
	return r, nil
}

// byStratum groups subject indices by stratum, strata in order of first
// appearance; nil strata is one stratum.
func byStratum(strata []int, n int) [][]int {
	if strata == nil {
		idx := make([]int, n)
		for i := range idx {
			idx[i] = i
		}
		return [][]int{idx}
	}
	pos := map[int]int{}
	var out [][]int
	for i, s := range strata {
		p, ok := pos[s]
		if !ok {
			p = len(out)
			pos[s] = p
			out = append(out, nil)
		}
		out[p] = append(out[p], i)
	}
	return out
}

// sortedBy returns idx sorted by time ascending, stable.
func sortedBy(time []float64, idx []int) []int {
	sub := make([]float64, len(idx))
	for i, j := range idx {
		sub[i] = time[j]
	}
	o := order(sub)
	out := make([]int, len(idx))
	for i, k := range o {
		out[i] = idx[k]
	}
	return out
}
