package infer

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/simtest"
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// The size simulation: invented panels (a simulation, not data) in which
// nothing happens at treatment. G clusters of 1 to 12 units each (wildly
// different sizes), T periods, unit and period effects, errors
// σ_g·(0.6·c_gt + e_it) with a cluster-period shock c_gt, an AR(1) unit
// error e_it (ρ = 0.5) and a log-normal cluster scale σ_g = exp(0.6·z_g):
// heteroskedastic and correlated within clusters. G1 clusters, drawn at
// random, start treatment together at period start. The model is the
// two-way fixed-effects regression y = α_i + γ_t + β·D_it + ε with unit
// effects absorbed (nested in clusters), period dummies in X and CR1
// clustered by cluster.

type wcrSimSpec struct {
	G, G1, T, Start int
	Draws           int // bootstrap draws per test
	PermDraws       int // Monte Carlo reassignments when not enumerated
	Leads           int // leads tested jointly (event-study variant); 0 for the ATT test
}

// wcrSimCounts tallies rejections at 5% (p ≤ 0.05) and interval coverage.
type wcrSimCounts struct {
	reps                    int
	cr1G, cr1H, nH          int // CR1-t with t(G−1); with t(H−1) where H ≥ 2 (nH reps)
	rad, webb, auto, perm   int
	covRad, covWebb         int
	infRad, infWebb         int // intervals with an infinite end
	chi2, fG, fH, nFH, wild int // joint lead tests
	hot, nHot               int // Hotelling's W(H−q)/(q(H−1)) against F(q, H−q)
}

// wcrSimPanel draws one null panel and returns its design, the column of the
// treatment dummy, the treated clusters, and per cluster the sum over its
// units of (post mean − pre mean) and its unit count, from which the DiD
// estimate of any assignment of clusters follows.
func wcrSimPanel(rng *rand.Rand, s wcrSimSpec) (Design, []bool, []float64, []float64) {
	G, T := s.G, s.T
	perm := rng.Perm(G)
	treated := make([]bool, G)
	for _, g := range perm[:s.G1] {
		treated[g] = true
	}
	k := T - 1 + 1 + s.Leads
	var rows, y []float64
	var cl, unit []int
	dsum := make([]float64, G)
	cnt := make([]float64, G)
	gamma := make([]float64, T)
	for t := range gamma {
		gamma[t] = rng.NormFloat64()
	}
	u := 0
	for g := range G {
		m := 1 + rng.IntN(12)
		sig := math.Exp(0.6 * rng.NormFloat64())
		c := make([]float64, T)
		for t := range c {
			c[t] = rng.NormFloat64()
		}
		for range m {
			alpha := rng.NormFloat64()
			e := rng.NormFloat64()
			pre, post := 0.0, 0.0
			for t := range T {
				if t > 0 {
					e = 0.5*e + math.Sqrt(0.75)*rng.NormFloat64()
				}
				v := alpha + gamma[t] + sig*(0.6*c[t]+e)
				if t < s.Start {
					pre += v
				} else {
					post += v
				}
				row := make([]float64, k)
				if t > 0 {
					row[t-1] = 1
				}
				if treated[g] {
					if t >= s.Start {
						row[T-1] = 1
					}
					for l := range s.Leads { // lead l+2 periods before the start
						if t == s.Start-2-l {
							row[T+l] = 1
						}
					}
				}
				rows = append(rows, row...)
				y = append(y, v)
				cl = append(cl, g)
				unit = append(unit, u)
			}
			dsum[g] += post/float64(T-s.Start) - pre/float64(s.Start)
			cnt[g]++
			u++
		}
	}
	return Design{X: mat.NewDense(len(y), k, rows), Y: y, Cluster: cl, Absorb: unit}, treated, dsum, cnt
}

func wcrSimulate(tb testing.TB, s wcrSimSpec, reps int, seed uint64) wcrSimCounts {
	tb.Helper()
	ctx := context.Background()
	rng := rand.New(rand.NewPCG(seed, uint64(s.G*100+s.G1)))
	var c wcrSimCounts
	H := min(s.G1, s.G-s.G1)
	a := make([]float64, s.T+s.Leads)
	a[s.T-1] = 1
	for range reps {
		d, treated, dsum, cnt := wcrSimPanel(rng, s)
		f, err := FitOLS(d)
		if err != nil {
			tb.Fatal(err)
		}
		c.reps++
		if s.Leads > 0 {
			R := mat.NewDense(s.Leads, s.T+s.Leads, nil)
			for l := range s.Leads {
				R.Set(l, s.T+l, 1)
			}
			w, err := f.Wald(R, nil, s.G1)
			if err != nil {
				tb.Fatal(err)
			}
			q := float64(s.Leads)
			c.chi2 += wcrRej(w.PChi2)
			c.fG += wcrRej(distuv.F{D1: q, D2: float64(s.G - 1)}.Survival(w.Stat / q))
			if w.HasF {
				c.nFH++
				c.fH += wcrRej(w.PF)
			}
			if H > s.Leads {
				c.nHot++
				hf := w.Stat * float64(H-s.Leads) / (q * float64(H-1))
				c.hot += wcrRej(distuv.F{D1: q, D2: float64(H - s.Leads)}.Survival(hf))
			}
			ww, err := f.WildWald(ctx, R, nil, WildOptions{Draws: s.Draws, TreatedClusters: s.G1, Seed: rng.Uint64()})
			if err != nil {
				tb.Fatal(err)
			}
			c.wild += wcrRej(ww.P)
			continue
		}
		tt := f.TStat(a, 0)
		c.cr1G += wcrRej(2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(s.G - 1)}.Survival(math.Abs(tt)))
		if H >= 2 {
			c.nH++
			c.cr1H += wcrRej(2 * distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(H - 1)}.Survival(math.Abs(tt)))
		}
		for _, ws := range []WeightScheme{Rademacher, Webb} {
			r, err := f.WildTest(ctx, a, 0, WildOptions{Draws: s.Draws, Weights: ws, Seed: rng.Uint64()})
			if err != nil {
				tb.Fatal(err)
			}
			rej := wcrRej(r.P)
			cov := 0
			if r.Lower < 0 && 0 < r.Upper {
				cov = 1
			}
			inf := 0
			if math.IsInf(r.Lower, 0) || math.IsInf(r.Upper, 0) {
				inf = 1
			}
			if ws == Rademacher {
				c.rad, c.covRad, c.infRad = c.rad+rej, c.covRad+cov, c.infRad+inf
			} else {
				c.webb, c.covWebb, c.infWebb = c.webb+rej, c.covWebb+cov, c.infWebb+inf
			}
			if ws == ChooseWeights(s.G1, s.G) {
				c.auto += rej
			}
		}
		// Randomization over clusters; the statistic is the TWFE estimate,
		// which in this balanced common-timing panel is the difference of the
		// treated and control units' mean (post − pre) changes.
		stat := func(as Assignment) (float64, error) {
			ts, tn := 0.0, 0.0
			for _, g := range as.Units {
				ts += dsum[g]
				tn += cnt[g]
			}
			all, alln := 0.0, 0.0
			for g := range dsum {
				all += dsum[g]
				alln += cnt[g]
			}
			return ts/tn - (all-ts)/(alln-tn), nil
		}
		pool := make([]int, s.G)
		obs := Assignment{}
		for g := range pool {
			pool[g] = g
			if treated[g] {
				obs.Units = append(obs.Units, g)
				obs.Starts = append(obs.Starts, s.Start)
			}
		}
		if b, _ := stat(obs); math.Abs(b-f.Beta[s.T-1]) > 1e-9*(1+math.Abs(b)) {
			tb.Fatalf("shortcut DiD %v differs from the regression's %v", b, f.Beta[s.T-1])
		}
		pr, err := Randomization(ctx, stat, pool, obs, RandomizationOptions{Draws: s.PermDraws, MaxExact: 1000, Seed: rng.Uint64()})
		if err != nil {
			tb.Fatal(err)
		}
		c.perm += wcrRej(pr.P)
	}
	return c
}

func wcrRej(p float64) int {
	if p <= 0.05 {
		return 1
	}
	return 0
}

// wcrRate formats x/n with its Wilson 95% interval.
func wcrRate(x, n int) string {
	if n == 0 {
		return "n/a"
	}
	lo, hi := simtest.Wilson(x, n)
	return fmt.Sprintf("%.3f [%.3f, %.3f]", float64(x)/float64(n), lo, hi)
}

// wcrTable renders the single-coefficient results as a Markdown table row.
func wcrTableRow(s wcrSimSpec, c wcrSimCounts) string {
	return strings.Join([]string{"", fmt.Sprint(s.G), fmt.Sprint(s.G1), fmt.Sprint(c.reps),
		wcrRate(c.cr1G, c.reps), wcrRate(c.cr1H, c.nH), wcrRate(c.rad, c.reps), wcrRate(c.webb, c.reps),
		wcrRate(c.perm, c.reps), wcrRate(c.covRad, c.reps), wcrRate(c.covWebb, c.reps),
		fmt.Sprintf("%d/%d", c.infRad, c.infWebb), ""}, " | ")
}

const wcrTableHead = " | G | G1 | reps | CR1 t(G−1) | CR1 t(H−1) | WCR Rademacher | WCR Webb | randomization | WCR-R coverage | WCR-W coverage | unbounded R/W | "

// TestSizeQuick is the fast version of the size studies (the long ones are
// in sim_validate_test.go behind the validate tag). The bounds are loose but
// each would catch a broken method. Single coefficient: with half the
// clusters treated every test must hold its size within sampling error; with
// one treated cluster the CR1 t test must show its known over-rejection
// (MacKinnon & Webb 2017) while WCR and randomization must not over-reject,
// and every interval must agree with its p-value. Two leads tested jointly:
// with three treated clusters the chi-square must over-reject (the failure
// the treated degrees of freedom fix) while the F on treated degrees of
// freedom and the WCR bootstrap must not; with half treated the bootstrap
// must hold 5% within sampling error.
func TestSizeQuick(t *testing.T) {
	if testing.Short() {
		t.Skip("simulation")
	}
	cases := []struct {
		s     wcrSimSpec
		reps  int
		check func(t *testing.T, c wcrSimCounts)
	}{
		{wcrSimSpec{G: 30, G1: 1, T: 4, Start: 2, Draws: 199, PermDraws: 99}, 150, func(t *testing.T, c wcrSimCounts) {
			wcrWithin(t, "CR1 t(G−1), one treated cluster (known over-rejection)", c.cr1G, c.reps, 0.15, 1)
			wcrWithin(t, "WCR Webb", c.webb, c.reps, 0, 0.08)
			wcrWithin(t, "WCR Rademacher", c.rad, c.reps, 0, 0.08)
		}},
		{wcrSimSpec{G: 30, G1: 15, T: 4, Start: 2, Draws: 199, PermDraws: 99}, 150, func(t *testing.T, c wcrSimCounts) {
			wcrWithin(t, "CR1 t(G−1)", c.cr1G, c.reps, 0.02, 0.08)
			wcrWithin(t, "WCR Webb", c.webb, c.reps, 0.02, 0.08)
			wcrWithin(t, "WCR Rademacher", c.rad, c.reps, 0.02, 0.08)
		}},
		{wcrSimSpec{G: 30, G1: 3, T: 6, Start: 4, Draws: 199, Leads: 2}, 120, func(t *testing.T, c wcrSimCounts) {
			wcrWithin(t, "chi-square with three treated clusters (known over-rejection)", c.chi2, c.reps, 0.10, 1)
			wcrWithin(t, "F(q, H−1)", c.fH, c.nFH, 0, 0.08)
			wcrWithin(t, "WCR Wald", c.wild, c.reps, 0, 0.08)
		}},
		{wcrSimSpec{G: 30, G1: 15, T: 6, Start: 4, Draws: 199, Leads: 2}, 120, func(t *testing.T, c wcrSimCounts) {
			wcrWithin(t, "F(q, H−1)", c.fH, c.nFH, 0, 0.08)
			wcrWithin(t, "WCR Wald", c.wild, c.reps, 0.02, 0.08)
		}},
	}
	for _, tc := range cases {
		s := tc.s
		t.Run(fmt.Sprintf("G=%d G1=%d leads=%d", s.G, s.G1, s.Leads), func(t *testing.T) {
			c := wcrSimulate(t, s, tc.reps, uint64(1+s.Leads))
			if s.Leads > 0 {
				t.Logf("chi2 %s, F(q,G-1) %s, F(q,H-1) %s, WCR Wald %s", wcrRate(c.chi2, c.reps), wcrRate(c.fG, c.reps),
					wcrRate(c.fH, c.nFH), wcrRate(c.wild, c.reps))
			} else {
				t.Log(wcrTableHead)
				t.Log(wcrTableRow(s, c))
				wcrWithin(t, "randomization", c.perm, c.reps, 0.02, 0.08)
				if c.covRad+c.rad != c.reps || c.covWebb+c.webb != c.reps {
					t.Errorf("interval and p-value disagree: coverage %d+%d, rejections %d+%d of %d", c.covRad, c.covWebb, c.rad, c.webb, c.reps)
				}
			}
			tc.check(t, c)
		})
	}
}

// wcrWithin fails the test when the Wilson 95% interval of the rejection
// rate x/n does not reach [lo, hi].
func wcrWithin(tb testing.TB, name string, x, n int, lo, hi float64) {
	tb.Helper()
	wl, wh := simtest.Wilson(x, n)
	if wh < lo || wl > hi {
		tb.Errorf("%s: rejection %s outside [%v, %v]", name, wcrRate(x, n), lo, hi)
	}
}
