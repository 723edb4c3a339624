package checklist

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat/distuv"
)

// ErrProportion is returned (wrapped) for counts or levels a proportion
// interval or test cannot use: negative counts, successes above trials, no
// trials, or a confidence level outside (0, 1).
var ErrProportion = errors.New("checklist: bad proportion input")

// Interval is a confidence interval [Lower, Upper] around Estimate at
// confidence level Level (0.95 for 95 %).
type Interval struct {
	Estimate, Lower, Upper, Level float64
}

// checkCount validates x successes out of n trials.
func checkCount(x, n int) error {
	switch {
	case n <= 0:
		return fmt.Errorf("%w: %d trials", ErrProportion, n)
	case x < 0 || x > n:
		return fmt.Errorf("%w: %d successes out of %d trials", ErrProportion, x, n)
	}
	return nil
}

// zFor returns the two-sided standard normal quantile for level, z = Φ⁻¹(1 − (1 − level)/2).
func zFor(level float64) (float64, error) {
	if !(level > 0 && level < 1) {
		return 0, fmt.Errorf("%w: confidence level %v not in (0, 1)", ErrProportion, level)
	}
	return distuv.UnitNormal.Quantile(1 - (1-level)/2), nil
}

// Wilson returns the Wilson score interval for the proportion x/n at the given
// confidence level (Wilson 1927; method 3 of Newcombe 1998, "Two-sided
// confidence intervals for the single proportion", Statistics in Medicine 17).
// It is the interval R's prop.test(x, n, correct = FALSE) reports. The limits
// stay inside [0, 1] and are exactly 0 or 1 when x is 0 or n.
func Wilson(x, n int, level float64) (Interval, error) {
	if err := checkCount(x, n); err != nil {
		return Interval{}, err
	}
	z, err := zFor(level)
	if err != nil {
		return Interval{}, err
	}
	p := float64(x) / float64(n)
	nf := float64(n)
	z2 := z * z
	den := 1 + z2/nf
	centre := (p + z2/(2*nf)) / den
	half := z / den * math.Sqrt(p*(1-p)/nf+z2/(4*nf*nf))
	iv := Interval{Estimate: p, Lower: centre - half, Upper: centre + half, Level: level}
	// The closed form gives 0 and 1 at the boundaries up to rounding; make them exact.
	if x == 0 {
		iv.Lower = 0
	}
	if x == n {
		iv.Upper = 1
	}
	return iv, nil
}

// NewcombeDiff returns Newcombe's hybrid score interval for the difference of
// two independent proportions p1 − p2 = x1/n1 − x2/n2 (Newcombe 1998,
// "Interval estimation for the difference between independent proportions:
// comparison of eleven methods", Statistics in Medicine 17, method 10). With
// Wilson limits (l1, u1) and (l2, u2) at the same level:
//
//	L = d − sqrt((p1 − l1)² + (u2 − p2)²),  U = d + sqrt((u1 − p1)² + (p2 − l2)²)
//
// The interval needs no continuity correction and stays inside [−1, 1].
func NewcombeDiff(x1, n1, x2, n2 int, level float64) (Interval, error) {
	a, err := Wilson(x1, n1, level)
	if err != nil {
		return Interval{}, fmt.Errorf("first proportion: %w", err)
	}
	b, err := Wilson(x2, n2, level)
	if err != nil {
		return Interval{}, fmt.Errorf("second proportion: %w", err)
	}
	d := a.Estimate - b.Estimate
	return Interval{
		Estimate: d,
		Lower:    d - math.Hypot(a.Estimate-a.Lower, b.Upper-b.Estimate),
		Upper:    d + math.Hypot(a.Upper-a.Estimate, b.Estimate-b.Lower),
		Level:    level,
	}, nil
}

// ZTest is the result of TwoProportionZ.
type ZTest struct {
	Diff float64 // p1 − p2
	Z    float64 // (p1 − p2) / SE under the pooled proportion
	Chi2 float64 // Z², the Pearson chi-square of the 2×2 table
	P    float64 // two-sided p-value
}

// TwoProportionZ tests p1 = p2 with the pooled two-proportion z test, no
// continuity correction: z = (p1 − p2) / sqrt(p̂(1 − p̂)(1/n1 + 1/n2)) with
// p̂ = (x1 + x2)/(n1 + n2). Z² equals the chi-square and P the p-value of R's
// prop.test(c(x1, x2), c(n1, n2), correct = FALSE). When both samples are all
// successes or all failures the statistic is 0 and P is 1 (R reports NaN there).
func TwoProportionZ(x1, n1, x2, n2 int) (ZTest, error) {
	if err := checkCount(x1, n1); err != nil {
		return ZTest{}, fmt.Errorf("first proportion: %w", err)
	}
	if err := checkCount(x2, n2); err != nil {
		return ZTest{}, fmt.Errorf("second proportion: %w", err)
	}
	p1 := float64(x1) / float64(n1)
	p2 := float64(x2) / float64(n2)
	pool := float64(x1+x2) / float64(n1+n2)
	se := math.Sqrt(pool * (1 - pool) * (1/float64(n1) + 1/float64(n2)))
	t := ZTest{Diff: p1 - p2, P: 1}
	if se == 0 {
		return t, nil
	}
	t.Z = t.Diff / se
	t.Chi2 = t.Z * t.Z
	// 2·(1 − Φ(|z|)) written with erfc keeps precision for small p.
	t.P = math.Erfc(math.Abs(t.Z) / math.Sqrt2)
	return t, nil
}

// BHAdjust returns Benjamini–Hochberg adjusted p-values (q-values) for p, in
// the order given (Benjamini and Hochberg 1995, JRSS B 57): with p sorted
// ascending, q(i) = min over j ≥ i of min(1, m·p(j)/j). It matches R's
// p.adjust(p, method = "BH"). A NaN or a value outside [0, 1] is an error
// naming its index.
func BHAdjust(p []float64) ([]float64, error) {
	m := len(p)
	order := make([]int, m)
	for i, v := range p {
		if !(v >= 0 && v <= 1) {
			return nil, fmt.Errorf("%w: p-value %v at index %d not in [0, 1]", ErrProportion, v, i)
		}
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return p[order[a]] < p[order[b]] })
	q := make([]float64, m)
	running := 1.0
	for r := m - 1; r >= 0; r-- {
		i := order[r]
		v := float64(m) / float64(r+1) * p[i]
		running = math.Min(running, v)
		q[i] = math.Min(1, running)
	}
	return q, nil
}
