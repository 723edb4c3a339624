package sequential

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// ErrInput is the sentinel under every error for looks or levels Boundaries
// cannot use.
var ErrInput = errors.New("sequential: bad input")

// gridPoints is the number of Simpson nodes over the continuation region of
// each look: enough for boundaries within 1e-4 of an independent computation (the tests).
const gridPoints = 301

// Look is one interim look: its information fraction, the cumulative type I
// error spent by then, and the two-sided critical value of the standardized
// statistic |Z| there. Nominal is the two-sided p-value threshold the
// boundary amounts to at that look alone.
type Look struct {
	Fraction   float64 `json:"information_fraction"`
	Spent      float64 `json:"alpha_spent"`
	Boundary   float64 `json:"z_boundary"`
	NominalP   float64 `json:"nominal_p"`
	Increments float64 `json:"alpha_increment"`
}

// OBFSpending is the Lan–DeMets spending function that approximates
// O'Brien–Fleming boundaries for a two-sided level alpha: α(t) = 2 − 2Φ(z /
// √t) with z the 1 − α/2 normal quantile (Lan & DeMets 1983, Biometrika 70,
// 659–663; Jennison & Turnbull 2000, §7.2).
func OBFSpending(alpha, t float64) float64 {
	if t <= 0 {
		return 0
	}
	if t >= 1 {
		return alpha
	}
	n := distuv.UnitNormal
	z := n.Quantile(1 - alpha/2)
	return 2 * n.Survival(z/math.Sqrt(t))
}

// Boundaries returns the two-sided boundaries for looks at the information
// fractions (increasing, the last 1) at overall level alpha, spending by
// OBFSpending. The statistics at the looks are taken as a Brownian motion
// in information (the canonical joint distribution, Jennison & Turnbull 2000,
// §3.1): the probability of first crossing at each look is computed by
// numerical integration over the continuation regions of the earlier looks
// (Armitage, McPherson & Rowe 1969; Jennison & Turnbull 2000, §19.2), and
// each boundary is the value that spends exactly the increment of α(t).
func Boundaries(fractions []float64, alpha float64) ([]Look, error) {
	if len(fractions) == 0 {
		return nil, fmt.Errorf("%w: no looks", ErrInput)
	}
	if !(alpha > 0 && alpha < 1) {
		return nil, fmt.Errorf("%w: level %g outside (0, 1)", ErrInput, alpha)
	}
	for i, t := range fractions {
		if !(t > 0 && t <= 1) || (i > 0 && t <= fractions[i-1]) {
			return nil, fmt.Errorf("%w: information fractions must increase within (0, 1], got %v", ErrInput, fractions)
		}
	}
	if fractions[len(fractions)-1] != 1 {
		return nil, fmt.Errorf("%w: the last look must be at information fraction 1, got %g", ErrInput, fractions[len(fractions)-1])
	}
	looks := make([]Look, len(fractions))
	var w walk
	prevSpent := 0.0
	for k, t := range fractions {
		spent := OBFSpending(alpha, t)
		inc := spent - prevSpent
		c := math.Inf(1)
		if inc > 0 {
			lo, hi := 0.0, 40.0
			for hi-lo > 1e-10 {
				mid := (lo + hi) / 2
				if w.cross(t, mid) > inc {
					lo = mid
				} else {
					hi = mid
				}
			}
			c = (lo + hi) / 2
		}
		looks[k] = Look{Fraction: t, Spent: spent, Boundary: c, NominalP: 2 * distuv.UnitNormal.Survival(c), Increments: inc}
		w.advance(t, c)
		prevSpent = spent
	}
	return looks, nil
}

// crossings returns, for boundaries bounds at the fractions, the
// probability under the null of first crossing at each look.
func crossings(fractions, bounds []float64) []float64 {
	var w walk
	out := make([]float64, len(fractions))
	for k, t := range fractions {
		out[k] = w.cross(t, bounds[k])
		w.advance(t, bounds[k])
	}
	return out
}

// walk is the sub-density of the score S = Z√t at the last look on its
// continuation region (the paths that crossed no boundary so far), on an
// even grid.
type walk struct {
	t        float64   // information fraction of the last look (0 before the first)
	xs, dens []float64 // grid nodes and density values; nil before the first look
}

// cross is the probability of staying inside every earlier boundary and
// leaving |Z| < c at a look at fraction t.
func (w *walk) cross(t, c float64) float64 {
	n := distuv.UnitNormal
	b, sd := c*math.Sqrt(t), math.Sqrt(t-w.t)
	if w.xs == nil {
		return 2 * n.Survival(c)
	}
	return simpson(w.xs, func(i int) float64 {
		u := w.xs[i]
		return w.dens[i] * (n.CDF((-b-u)/sd) + n.Survival((b-u)/sd))
	})
}

// advance moves the density to a look at fraction t with boundary c.
func (w *walk) advance(t, c float64) {
	n := distuv.UnitNormal
	b, sd := math.Min(c, 40)*math.Sqrt(t), math.Sqrt(t-w.t)
	xs, dens := make([]float64, gridPoints), make([]float64, gridPoints)
	for i := range xs {
		s := -b + 2*b*float64(i)/float64(gridPoints-1)
		xs[i] = s
		if w.xs == nil {
			dens[i] = n.Prob(s/sd) / sd
			continue
		}
		dens[i] = simpson(w.xs, func(j int) float64 { return w.dens[j] * n.Prob((s-w.xs[j])/sd) / sd })
	}
	w.t, w.xs, w.dens = t, xs, dens
}

// EqualFractions returns K equally spaced information fractions 1/K, ..., 1.
func EqualFractions(k int) []float64 {
	out := make([]float64, k)
	for i := range out {
		out[i] = float64(i+1) / float64(k)
	}
	return out
}

// simpson integrates f over the even grid xs (an odd number of nodes) by
// Simpson's rule.
func simpson(xs []float64, f func(i int) float64) float64 {
	n := len(xs)
	if n < 3 {
		return 0
	}
	h := (xs[n-1] - xs[0]) / float64(n-1)
	s := f(0) + f(n-1)
	for i := 1; i < n-1; i++ {
		if i%2 == 1 {
			s += 4 * f(i)
		} else {
			s += 2 * f(i)
		}
	}
	return s * h / 3
}
