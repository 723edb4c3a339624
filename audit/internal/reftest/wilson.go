package reftest

import "math"

// Wilson returns the Wilson score 95% interval for x successes in n trials
// (Wilson 1927; the interval of R's prop.test(x, n, correct = FALSE)), for
// quoting simulated rates.
func Wilson(x, n int) (lo, hi float64) {
	const z = 1.959963984540054
	p, nf := float64(x)/float64(n), float64(n)
	c := (p + z*z/(2*nf)) / (1 + z*z/nf)
	h := z / (1 + z*z/nf) * math.Sqrt(p*(1-p)/nf+z*z/(4*nf*nf))
	return math.Max(0, c-h), math.Min(1, c+h)
}
