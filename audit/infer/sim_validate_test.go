//go:build validate

package infer

import (
	"fmt"
	"testing"
)

// TestSizeValidate is the long size and coverage study (go test -tags
// validate): 1000 null panels per cell, 999 bootstrap draws, randomization
// exact up to 1000 reassignments and 999 Monte Carlo draws beyond. It logs
// the Markdown tables quoted in the package's report, each rate with its
// Wilson 95% interval, and fails when a method meant to hold its size at
// that number of treated clusters does not (the interval must reach 5% ± 2
// points) — see the bounds below.
func TestSizeValidate(t *testing.T) {
	const reps = 1000
	t.Log(wcrTableHead)
	for _, s := range []wcrSimSpec{
		{G: 40, G1: 1}, {G: 40, G1: 2}, {G: 40, G1: 4}, {G: 40, G1: 8}, {G: 40, G1: 20},
		{G: 20, G1: 1}, {G: 20, G1: 3}, {G: 20, G1: 10},
	} {
		s.T, s.Start, s.Draws, s.PermDraws = 6, 3, 999, 999
		c := wcrSimulate(t, s, reps, 2026)
		t.Log(wcrTableRow(s, c))
		t.Run(fmt.Sprintf("G=%d G1=%d", s.G, s.G1), func(t *testing.T) {
			near5 := func(name string, x int) { t.Helper(); wcrWithin(t, name, x, c.reps, 0.03, 0.07) }
			near5("randomization", c.perm)
			if c.covRad+c.rad != c.reps || c.covWebb+c.webb != c.reps {
				t.Errorf("interval and p-value disagree")
			}
			if s.G1 >= 8 {
				near5("WCR with the chosen weights", c.auto)
			}
		})
	}
}

// TestLeadsValidate is the size study of the joint test of two leads of an
// event study (T = 8, start at period 5, leads at −3 and −2, −1 the
// reference): chi-square, W/q against F(q, G−1) as commonly used, against
// F(q, H−1) as Wald reports it, Hotelling's form on (q, H−q) (rejected
// alternative), and the WCR bootstrap of the Wald statistic with the weights
// ChooseWeights picks.
func TestLeadsValidate(t *testing.T) {
	const reps = 1000
	t.Log(" | G | G1 | reps | Wald chi2 | W/q vs F(q, G−1) | W/q vs F(q, H−1) | Hotelling F(q, H−q) | WCR Wald | ")
	for _, s := range []wcrSimSpec{
		{G: 40, G1: 2}, {G: 40, G1: 3}, {G: 40, G1: 4}, {G: 40, G1: 8}, {G: 40, G1: 20},
	} {
		s.T, s.Start, s.Draws, s.Leads = 8, 5, 999, 2
		c := wcrSimulate(t, s, reps, 7)
		t.Logf(" | %d | %d | %d | %s | %s | %s | %s | %s | ", s.G, s.G1, c.reps, wcrRate(c.chi2, c.reps),
			wcrRate(c.fG, c.reps), wcrRate(c.fH, c.nFH), wcrRate(c.hot, c.nHot), wcrRate(c.wild, c.reps))
		t.Run(fmt.Sprintf("G=%d G1=%d", s.G, s.G1), func(t *testing.T) {
			if s.G1 >= 8 {
				wcrWithin(t, "WCR Wald", c.wild, c.reps, 0.03, 0.07)
			}
		})
	}
}
