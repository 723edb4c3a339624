// Package simtest holds what the simulation studies of the estimators and
// tests share: a rejection or coverage count with its Wilson 95% interval
// (checklist.Wilson, checked against R's prop.test). It is for tests only.
package simtest

import (
	"fmt"

	"github.com/loadwake/loadwake/audit/checklist"
)

// Wilson returns the Wilson score 95% interval of x successes in n trials;
// (0, 1) when n is 0 or the counts are invalid.
func Wilson(x, n int) (lo, hi float64) {
	iv, err := checklist.Wilson(x, n, 0.95)
	if err != nil {
		return 0, 1
	}
	return iv.Lower, iv.Upper
}

// Rate formats x of n as "0.053 [0.041, 0.069]": the share and its Wilson 95%
// interval, the form the closing notes quote.
func Rate(x, n int) string {
	lo, hi := Wilson(x, n)
	if n == 0 {
		return "n/a"
	}
	return fmt.Sprintf("%.3f [%.3f, %.3f]", float64(x)/float64(n), lo, hi)
}
