package survival

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/stat/distuv"
)

// ErrInput is the sentinel under every error about unusable data.
var ErrInput = errors.New("survival: invalid input")

// Curve is a Kaplan–Meier survival curve: one step per distinct event time.
type Curve struct {
	N      int       // subjects
	Events int       // observed events
	Times  []float64 // distinct event times, ascending
	NRisk  []int     // subjects at risk just before each time (time >= t)
	NEvent []int     // events at each time
	Surv   []float64 // S(t) just after each time
	// Greenwood holds Greenwood's sum Σ d/(n(n-d)) up to each time: the
	// variance of log S(t).
	Greenwood []float64
	times     []float64 // every subject's time, sorted, for NRiskAt
}

// KaplanMeier estimates the survival curve of subjects with the given times
// and event flags (false: censored at that time). Times must be finite and
// not negative.
func KaplanMeier(time []float64, event []bool) (*Curve, error) {
	if len(time) != len(event) {
		return nil, fmt.Errorf("%w: %d times but %d event flags", ErrInput, len(time), len(event))
	}
	if err := checkTimes(time); err != nil {
		return nil, err
	}
	idx := order(time)
	c := &Curve{N: len(time), times: make([]float64, len(time))}
	for i, j := range idx {
		c.times[i] = time[j]
	}
	s, gw := 1.0, 0.0
	for i := 0; i < len(idx); {
		t := time[idx[i]]
		atRisk := len(idx) - i
		d, k := 0, i
		for ; k < len(idx) && time[idx[k]] == t; k++ {
			if event[idx[k]] {
				d++
			}
		}
		if d > 0 {
			s *= 1 - float64(d)/float64(atRisk)
			if atRisk > d {
				gw += float64(d) / (float64(atRisk) * float64(atRisk-d))
			} else {
				gw = math.Inf(1)
			}
			c.Times = append(c.Times, t)
			c.NRisk = append(c.NRisk, atRisk)
			c.NEvent = append(c.NEvent, d)
			c.Surv = append(c.Surv, s)
			c.Greenwood = append(c.Greenwood, gw)
			c.Events += d
		}
		i = k
	}
	return c, nil
}

// Point is the curve read at one time.
type Point struct {
	Time  float64
	NRisk int     // subjects with time >= Time
	Surv  float64 // S(Time)
	SE    float64 // standard error of S (Greenwood): S·sqrt(Σ d/(n(n-d)))
	Lower float64 // log-log 95% band: exp(-exp(log(-log S) ± z·sqrt(V)/|log S|))
	Upper float64
}

// At reads the curve at time t with a log-log band of the given level (0.95
// when level is not in (0, 1)). Where S is 1 the band is [1, 1]; where S is
// 0 or the variance is infinite, [0, 0] and NaN SE respectively.
func (c *Curve) At(t, level float64) Point {
	if !(level > 0 && level < 1) {
		level = 0.95
	}
	z := distuv.UnitNormal.Quantile(1 - (1-level)/2)
	p := Point{Time: t, NRisk: c.NRiskAt(t), Surv: 1, Lower: 1, Upper: 1}
	k := sort.SearchFloat64s(c.Times, math.Nextafter(t, math.Inf(1))) - 1 // last event time <= t
	if k < 0 {
		return p
	}
	p.Surv = c.Surv[k]
	v := c.Greenwood[k]
	p.SE = p.Surv * math.Sqrt(v)
	switch {
	case p.Surv <= 0:
		p.Lower, p.Upper, p.SE = 0, 0, 0
	case p.Surv >= 1:
	default:
		ls := math.Log(p.Surv)
		th, sd := math.Log(-ls), math.Sqrt(v)/math.Abs(ls)
		p.Lower = math.Exp(-math.Exp(th + z*sd))
		p.Upper = math.Exp(-math.Exp(th - z*sd))
	}
	return p
}

// NRiskAt counts the subjects whose time is at least t.
func (c *Curve) NRiskAt(t float64) int {
	return len(c.times) - sort.SearchFloat64s(c.times, t)
}

// Median returns the smallest event time where S drops to 0.5 or below;
// false when it never does.
func (c *Curve) Median() (float64, bool) {
	for i, s := range c.Surv {
		if s <= 0.5 {
			return c.Times[i], true
		}
	}
	return 0, false
}

func checkTimes(time []float64) error {
	if len(time) == 0 {
		return fmt.Errorf("%w: no subjects", ErrInput)
	}
	for i, t := range time {
		if math.IsNaN(t) || math.IsInf(t, 0) || t < 0 {
			return fmt.Errorf("%w: subject %d has time %v", ErrInput, i, t)
		}
	}
	return nil
}

// order returns the indices of time in ascending order, stable.
func order(time []float64) []int {
	idx := make([]int, len(time))
	for i := range idx {
		idx[i] = i
	}
	sort.SliceStable(idx, func(a, b int) bool { return time[idx[a]] < time[idx[b]] })
	return idx
}
