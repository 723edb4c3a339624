package infer

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"path/filepath"
	"slices"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/reftest"
	"gonum.org/v1/gonum/mat"
)

// scoreFatalities builds R's model.matrix(~ beertax + unemp + state + year)
// for testdata/score_fatalities.csv: intercept, beertax, unemp, dummies for
// the states after the first (sorted) and the years after the first;
// clusters are the states in sorted order.
func scoreFatalities(tb testing.TB) (*scoreDense, []string) {
	tb.Helper()
	rows := reftest.Load(tb, filepath.Join("testdata", "score_fatalities.csv")).Rows
	var states, years []string
	for _, r := range rows {
		if !slices.Contains(states, r["state"]) {
			states = append(states, r["state"])
		}
		if !slices.Contains(years, r["year"]) {
			years = append(years, r["year"])
		}
	}
	slices.Sort(states)
	slices.Sort(years)
	k := 3 + len(states) - 1 + len(years) - 1
	d := &scoreDense{x: mat.NewDense(len(rows), k, nil), g: len(states)}
	for i, r := range rows {
		d.y = append(d.y, reftest.Atof(tb, r["fatal"]))
		s := slices.Index(states, r["state"])
		y := slices.Index(years, r["year"])
		d.cl = append(d.cl, s)
		d.x.Set(i, 0, 1)
		d.x.Set(i, 1, reftest.Atof(tb, r["beertax"]))
		d.x.Set(i, 2, reftest.Atof(tb, r["unemp"]))
		if s > 0 {
			d.x.Set(i, 2+s, 1)
		}
		if y > 0 {
			d.x.Set(i, 2+len(states)-1+y, 1)
		}
	}
	return d, states
}

func scoreClose(tb testing.TB, what string, got, want, rel float64) {
	tb.Helper()
	if d := math.Abs(got - want); d > rel*math.Max(math.Abs(want), 1e-3) || math.IsNaN(got) {
		tb.Errorf("%s = %.12g, want %.12g (R; diff %.3g)", what, got, want, d)
	}
}

// TestScoreRestrictedFitAgainstR checks the restricted estimate, the state
// score sums, c_g = a'H⁻¹s_g, the score statistic and the Hessian against
// R 4.2.2 glm(family = poisson) fits with the restriction imposed by an
// offset (testdata/R/score_fatalities.R; data: AER 1.2.10 Fatalities).
func TestScoreRestrictedFitAgainstR(t *testing.T) {
	d, states := scoreFatalities(t)
	refs := reftest.Load(t, filepath.Join("testdata", "score_fatalities_ref.csv")).Rows
	cls := reftest.Load(t, filepath.Join("testdata", "score_fatalities_clusters.csv")).Rows
	_, k := d.x.Dims()
	for _, ref := range refs {
		t.Run(ref["case"], func(t *testing.T) {
			a := make([]float64, k)
			a[1], a[2] = reftest.Atof(t, ref["a1"]), reftest.Atof(t, ref["a2"])
			b0 := reftest.Atof(t, ref["b0"])
			n, _ := d.x.Dims()
			th := make([]float64, k)
			th[0] = math.Log(mat.Sum(mat.NewVecDense(n, d.y)) / float64(n))
			beta, err := scoreNewtonKKT(d.eval, a, b0, th)
			if err != nil {
				t.Fatal(err)
			}
			scoreClose(t, "beertax", beta[1], reftest.Atof(t, ref["beertax"]), 1e-8)
			scoreClose(t, "unemp", beta[2], reftest.Atof(t, ref["unemp"]), 1e-8)
			fr, err := d.fitter(0)(context.Background(), a, b0)
			if err != nil {
				t.Fatal(err)
			}
			c, f, err := scoreContrib(fr, a)
			if err != nil {
				t.Fatal(err)
			}
			scoreClose(t, "stat", scoreStat(c, f), reftest.Atof(t, ref["stat"]), 1e-8)
			h := fr.Hessian
			scoreClose(t, "H[beertax,beertax]", h.At(1, 1), reftest.Atof(t, ref["h11"]), 1e-8)
			scoreClose(t, "H[beertax,unemp]", h.At(1, 2), reftest.Atof(t, ref["h12"]), 1e-8)
			scoreClose(t, "H[unemp,unemp]", h.At(2, 2), reftest.Atof(t, ref["h22"]), 1e-8)
			var hi mat.SymDense
			var ch mat.Cholesky
			if !ch.Factorize(h) {
				t.Fatal("Hessian not positive definite")
			}
			if err := ch.InverseTo(&hi); err != nil {
				t.Fatal(err)
			}
			blk := mat.NewSymDense(2, []float64{hi.At(1, 1), hi.At(1, 2), hi.At(2, 1), hi.At(2, 2)})
			var schur mat.SymDense
			if !ch.Factorize(blk) {
				t.Fatal("block not positive definite")
			}
			if err := ch.InverseTo(&schur); err != nil {
				t.Fatal(err)
			}
			scoreClose(t, "Schur[1,1]", schur.At(0, 0), reftest.Atof(t, ref["schur11"]), 1e-7)
			scoreClose(t, "Schur[1,2]", schur.At(0, 1), reftest.Atof(t, ref["schur12"]), 1e-7)
			scoreClose(t, "Schur[2,2]", schur.At(1, 1), reftest.Atof(t, ref["schur22"]), 1e-7)
			seen := 0
			for _, r := range cls {
				if r["case"] != ref["case"] {
					continue
				}
				g := slices.Index(states, r["state"])
				if g < 0 {
					t.Fatalf("state %q not in data", r["state"])
				}
				seen++
				// score sums are differences of large numbers: absolute
				// tolerance on the scale of the counts
				if got, want := fr.Scores.At(g, 1), reftest.Atof(t, r["s_beertax"]); math.Abs(got-want) > 1e-6 {
					t.Errorf("%s: beertax score %.10g, want %.10g", r["state"], got, want)
				}
				if got, want := fr.Scores.At(g, 2), reftest.Atof(t, r["s_unemp"]); math.Abs(got-want) > 1e-5 {
					t.Errorf("%s: unemp score %.10g, want %.10g", r["state"], got, want)
				}
				if got, want := c[g], reftest.Atof(t, r["c"]); math.Abs(got-want) > 1e-9 {
					t.Errorf("%s: c = %.12g, want %.12g", r["state"], got, want)
				}
			}
			if seen != len(states) {
				t.Errorf("%d clusters in the reference, want %d", seen, len(states))
			}
		})
	}
}

// TestScoreBootstrapFatalities runs the whole procedure on the R data: the
// standard error at the estimate is R's sandwich::vcovCL(type = "HC1") one
// (testdata/score_fatalities_unrestricted.csv), the interval holds the
// estimate, and the p-value at each end is on the right side of 0.05.
func TestScoreBootstrapFatalities(t *testing.T) {
	d, _ := scoreFatalities(t)
	un := reftest.Load(t, filepath.Join("testdata", "score_fatalities_unrestricted.csv")).Rows[0]
	est, se := reftest.Atof(t, un["estimate"]), reftest.Atof(t, un["se_hc1"])
	_, k := d.x.Dims()
	a := make([]float64, k)
	a[1] = 1
	opts := DefaultScoreOptions()
	opts.Draws, opts.Tol = 999, 1e-3
	ctx := context.Background()
	r, err := ScoreBootstrap(ctx, d.fitter(0), a, est, 0, opts)
	if err != nil {
		t.Fatal(err)
	}
	scoreClose(t, "SE", r.SE, se, 1e-7)
	if r.Clusters != 48 || r.Weights != ScoreRademacher || r.Enumerated {
		t.Errorf("clusters %d weights %v enumerated %v; want 48 rademacher random", r.Clusters, r.Weights, r.Enumerated)
	}
	if !(r.Lo < est && est < r.Hi) {
		t.Errorf("interval [%g, %g] misses the estimate %g", r.Lo, r.Hi, est)
	}
	if (r.P <= 0.05) != (0 < r.Lo || 0 > r.Hi) {
		t.Errorf("p = %g at 0 but interval [%g, %g]", r.P, r.Lo, r.Hi)
	}
	t.Logf("beertax: t = %.4f, p = %.4f, 95%% [%.4f, %.4f], se %.4f, %d fits", r.Stat, r.P, r.Lo, r.Hi, r.SE, r.Fits)
}

// scoreSimPanel draws an invented Poisson panel: g units (one cluster each),
// the first nt treated from month T/2 with log effect beta, unit effects
// N(log 5, 0.5²), a month trend, and multiplicative lognormal noise with
// AR(1) correlation 0.5 within unit (σ = 0.5): overdispersed, serially
// correlated counts.
func scoreSimPanel(rng *rand.Rand, g, nt, T int, beta float64) *scorePanel {
	p := &scorePanel{y: make([][]float64, g), d: make([][]float64, g)}
	const rho, sigma = 0.5, 0.5
	for u := range g {
		p.y[u], p.d[u] = make([]float64, T), make([]float64, T)
		alpha := math.Log(5) + 0.5*rng.NormFloat64()
		z := rng.NormFloat64()
		for t := range T {
			if t > 0 {
				z = rho*z + math.Sqrt(1-rho*rho)*rng.NormFloat64()
			}
			eta := alpha + 0.05*float64(t) + sigma*z
			if u < nt && t >= T/2 {
				p.d[u][t] = 1
				eta += beta
			}
			p.y[u][t] = scorePoisson(rng, math.Exp(eta))
		}
	}
	return p
}

// scorePoisson draws a Poisson count (inversion; means here are small).
func scorePoisson(rng *rand.Rand, mu float64) float64 {
	if mu > 500 {
		return math.Max(0, math.Round(mu+math.Sqrt(mu)*rng.NormFloat64()))
	}
	l, k, p := math.Exp(-mu), 0.0, rng.Float64()
	s := l
	for p > s {
		k++
		l *= mu / k
		s += l
	}
	return k
}

// TestScoreConcentratedMatchesDummies checks the panel fitter (unit effects
// concentrated out) against the dense fitter with unit and month dummies:
// the restricted estimate's c_g = a'H⁻¹s_g must agree.
func TestScoreConcentratedMatchesDummies(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 1))
	const g, T = 12, 6
	p := scoreSimPanel(rng, g, 3, T, -0.2)
	k := 1 + (T - 1) + g
	d := &scoreDense{x: mat.NewDense(g*T, k, nil), g: g}
	for u := range g {
		for tt := range T {
			i := u*T + tt
			d.y = append(d.y, p.y[u][tt])
			d.cl = append(d.cl, u)
			d.x.Set(i, 0, p.d[u][tt])
			if tt > 0 {
				d.x.Set(i, tt, 1)
			}
			d.x.Set(i, T+u, 1) // one dummy per unit, no intercept
		}
	}
	ctx := context.Background()
	for _, b0 := range []float64{-0.5, 0, 0.3} {
		aP := make([]float64, T)
		aP[0] = 1
		aD := make([]float64, k)
		aD[0] = 1
		fp, err := p.fitter()(ctx, aP, b0)
		if err != nil {
			t.Fatal(err)
		}
		fd, err := d.fitter(T)(ctx, aD, b0)
		if err != nil {
			t.Fatal(err)
		}
		cp, ffp, err := scoreContrib(fp, aP)
		if err != nil {
			t.Fatal(err)
		}
		cd, ffd, err := scoreContrib(fd, aD)
		if err != nil {
			t.Fatal(err)
		}
		for u := range g {
			if math.Abs(cp[u]-cd[u]) > 1e-9*(1+math.Abs(cd[u])) {
				t.Errorf("b0 %g unit %d: concentrated c = %.12g, dummies %.12g", b0, u, cp[u], cd[u])
			}
		}
		if math.Abs(ffp-ffd) > 1e-12 {
			t.Errorf("factor %g vs %g", ffp, ffd)
		}
	}
}

// scoreBrutePValue computes the enumerated bootstrap p-value the literal
// way: for every weight vector, β* − β̃ = H⁻¹Σ v_g s_g, V* = f H⁻¹(Σ v_g² s_g
// s_g')H⁻¹, t* = a'(β* − β̃)/√(a'V*a); p = share of |t*| ≥ |t(1,…,1)|.
func scoreBrutePValue(fr ScoreFit, a []float64, points []float64) float64 {
	g, k := fr.Scores.Dims()
	var hinv mat.SymDense
	var ch mat.Cholesky
	ch.Factorize(fr.Hessian)
	_ = ch.InverseTo(&hinv)
	f := float64(g) / float64(g-1)
	if fr.NObs > 0 {
		f *= float64(fr.NObs-1) / float64(fr.NObs-fr.NParams)
	}
	av := mat.NewVecDense(k, a)
	stat := func(v []float64) float64 {
		sum := mat.NewVecDense(k, nil)
		meat := mat.NewSymDense(k, nil)
		for j := range g {
			s := mat.NewVecDense(k, nil)
			s.ScaleVec(v[j], fr.Scores.RowView(j))
			sum.AddVec(sum, s)
			meat.SymRankOne(meat, 1, s)
		}
		var db mat.VecDense
		db.MulVec(&hinv, sum)
		var tmp, vv mat.Dense
		tmp.Mul(&hinv, meat)
		vv.Mul(&tmp, &hinv)
		return math.Abs(mat.Dot(av, &db)) / math.Sqrt(f*mat.Inner(av, &vv, av))
	}
	ones := make([]float64, g)
	for j := range ones {
		ones[j] = 1
	}
	t0 := stat(ones)
	total := 1
	for range g {
		total *= len(points)
	}
	hits := 0
	v := make([]float64, g)
	for i := range total {
		r := i
		for j := range g {
			v[j] = points[r%len(points)]
			r /= len(points)
		}
		if stat(v) >= t0*(1-1e-9) {
			hits++
		}
	}
	return float64(hits) / float64(total)
}

// TestScoreEnumerationAgainstBruteForce: with every weight vector
// enumerated the p-value is deterministic; it must equal the literal
// computation at several nulls, and the interval's ends must sit where the
// literal p-value crosses 0.05.
func TestScoreEnumerationAgainstBruteForce(t *testing.T) {
	tests := []struct {
		name    string
		g, nt   int
		weights ScoreWeights
		points  []float64
	}{
		{"rademacher 10 clusters", 10, 4, ScoreRademacher, []float64{-1, 1}},
		{"webb 4 clusters", 4, 2, ScoreWebb, []float64{-math.Sqrt(1.5), -1, -math.Sqrt(0.5), math.Sqrt(0.5), 1, math.Sqrt(1.5)}},
	}
	for i, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(11, uint64(i)))
			p := scoreSimPanel(rng, tc.g, tc.nt, 6, -0.3)
			ctx := context.Background()
			fit := p.fitter()
			a := make([]float64, 6)
			a[0] = 1
			est := scorePanelEstimate(t, p)
			opts := DefaultScoreOptions()
			opts.Weights, opts.Tol = tc.weights, 1e-7
			for _, null := range []float64{est - 0.6, est + 0.1} {
				r, err := ScoreBootstrap(ctx, fit, a, est, null, opts)
				if err != nil {
					t.Fatal(err)
				}
				if !r.Enumerated || r.Weights != tc.weights {
					t.Fatalf("enumerated %v weights %v", r.Enumerated, r.Weights)
				}
				fr, err := fit(ctx, a, null)
				if err != nil {
					t.Fatal(err)
				}
				if want := scoreBrutePValue(fr, a, tc.points); math.Abs(r.P-want) > 1e-12 {
					t.Errorf("null %g: p = %.6f, brute force %.6f", null, r.P, want)
				}
				// the ends: accepted at the end, rejected just outside
				for _, e := range []struct{ at, out float64 }{{r.Lo, r.Lo - 1e-5}, {r.Hi, r.Hi + 1e-5}} {
					fe, err := fit(ctx, a, e.at)
					if err != nil {
						t.Fatal(err)
					}
					fo, err := fit(ctx, a, e.out)
					if err != nil {
						t.Fatal(err)
					}
					if pe, po := scoreBrutePValue(fe, a, tc.points), scoreBrutePValue(fo, a, tc.points); !(pe > 0.05 && po <= 0.05) {
						t.Errorf("end %g: brute-force p %.4f inside, %.4f just outside", e.at, pe, po)
					}
				}
			}
		})
	}
}

// scorePanelEstimate returns the unrestricted estimate of β by Newton.
func scorePanelEstimate(tb testing.TB, p *scorePanel) float64 {
	tb.Helper()
	T := len(p.y[0])
	// the unrestricted optimum: restrict a direction that is free (a
	// zero-weight restriction is not allowed), so maximise directly
	th := make([]float64, T)
	for range 100 {
		_, g, h := p.eval(th)
		var step mat.VecDense
		if err := step.SolveVec(h, mat.NewVecDense(T, g)); err != nil {
			tb.Fatal(err)
		}
		m := 0.0
		for j := range T {
			th[j] += step.AtVec(j)
			m = max(m, math.Abs(step.AtVec(j)))
		}
		if m < 1e-12 {
			return th[0]
		}
	}
	tb.Fatal("no convergence")
	return 0
}

// TestScoreFactorInvariance: the small-sample factor changes the statistic
// but neither the p-value nor the interval.
func TestScoreFactorInvariance(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 3))
	p := scoreSimPanel(rng, 20, 5, 6, 0.2)
	est := scorePanelEstimate(t, p)
	a := []float64{1, 0, 0, 0, 0, 0}
	ctx := context.Background()
	plain := func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
		fr, err := p.fitter()(ctx, a, b0)
		fr.NObs, fr.NParams = 0, 0
		return fr, err
	}
	opts := DefaultScoreOptions()
	opts.Draws = 999
	r1, err := ScoreBootstrap(ctx, p.fitter(), a, est, 0, opts)
	if err != nil {
		t.Fatal(err)
	}
	r2, err := ScoreBootstrap(ctx, plain, a, est, 0, opts)
	if err != nil {
		t.Fatal(err)
	}
	// the ends are bisected to Tol·SE; rounding in f·Σc² may move a tie
	if tol := 2 * opts.Tol * r1.SE; r1.P != r2.P || math.Abs(r1.Lo-r2.Lo) > tol || math.Abs(r1.Hi-r2.Hi) > tol {
		t.Errorf("with N, K: p %g [%g, %g]; without: p %g [%g, %g]", r1.P, r1.Lo, r1.Hi, r2.P, r2.Lo, r2.Hi)
	}
	if want := r2.Stat * math.Sqrt(r2.Factor/r1.Factor); math.Abs(r1.Stat-want) > 1e-12 {
		t.Errorf("stat %g, want %g", r1.Stat, want)
	}
	if r2.Factor != 20.0/19 {
		t.Errorf("factor without N, K = %g, want G/(G-1) = %g", r2.Factor, 20.0/19)
	}
}

// TestScoreBootstrapErrors: bad input gives errors, not panics.
func TestScoreBootstrapErrors(t *testing.T) {
	good := func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
		return ScoreFit{Scores: mat.NewDense(3, 1, []float64{1, -2, 0.5 + b0}), Hessian: mat.NewSymDense(1, []float64{2})}, nil
	}
	calls := 0
	shrinking := func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
		calls++
		g := 3
		if calls > 1 {
			g = 2
		}
		return ScoreFit{Scores: mat.NewDense(g, 1, nil), Hessian: mat.NewSymDense(1, []float64{2})}, nil
	}
	tests := []struct {
		name string
		fit  ScoreFitter
		a    []float64
		want error
	}{
		{"no restriction", good, nil, ErrScoreInput},
		{"wrong length", good, []float64{1, 2}, ErrScoreInput},
		{"not positive definite", func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
			return ScoreFit{Scores: mat.NewDense(3, 1, []float64{1, 2, 3}), Hessian: mat.NewSymDense(1, []float64{-1})}, nil
		}, []float64{1}, ErrScoreInput},
		{"one cluster", func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
			return ScoreFit{Scores: mat.NewDense(1, 1, []float64{1}), Hessian: mat.NewSymDense(1, []float64{1})}, nil
		}, []float64{1}, ErrScoreInput},
		{"zero scores", shrinking, []float64{1}, ErrScoreInput},
		{"fit fails", func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
			return ScoreFit{}, errors.New("boom")
		}, []float64{1}, nil},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := ScoreBootstrap(context.Background(), tc.fit, tc.a, 0, 0, DefaultScoreOptions())
			if err == nil {
				t.Fatal("no error")
			}
			if tc.want != nil && !errors.Is(err, tc.want) {
				t.Errorf("error %v, want %v", err, tc.want)
			}
		})
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := ScoreBootstrap(ctx, good, []float64{1}, 0, 0, DefaultScoreOptions()); !errors.Is(err, context.Canceled) {
		t.Errorf("cancelled: %v", err)
	}
}

// TestScoreUnboundedWithOneTreated: with one treated cluster its score
// dominates every restricted fit far from the estimate, each |t*| then
// equals |t| and nothing is rejected: the interval must be reported as
// unbounded rather than cut at the search limit.
func TestScoreUnboundedWithOneTreated(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 5))
	p := scoreSimPanel(rng, 12, 1, 6, -0.2)
	est := scorePanelEstimate(t, p)
	opts := DefaultScoreOptions()
	opts.Weights, opts.MaxSE = ScoreRademacher, 20
	r, err := ScoreBootstrap(context.Background(), p.fitter(), []float64{1, 0, 0, 0, 0, 0}, est, est+3*0.2, opts)
	if err != nil {
		t.Fatal(err)
	}
	if !math.IsInf(r.Lo, -1) || !math.IsInf(r.Hi, 1) {
		t.Errorf("interval [%g, %g], want unbounded on both sides", r.Lo, r.Hi)
	}
	if r.P <= 0.05 {
		t.Errorf("p = %g inside an unbounded interval", r.P)
	}
	if r.FitFailed {
		t.Error("FitFailed set though every fit succeeded")
	}
	// a model that cannot be fitted above est + 1: that end is unbounded
	// as far as the model goes, and says so
	limited := func(ctx context.Context, a []float64, b0 float64) (ScoreFit, error) {
		if b0 > est+1 {
			return ScoreFit{}, errors.New("no fit")
		}
		return p.fitter()(ctx, a, b0)
	}
	r, err = ScoreBootstrap(context.Background(), limited, []float64{1, 0, 0, 0, 0, 0}, est, est+0.5, opts)
	if err != nil {
		t.Fatal(err)
	}
	if !math.IsInf(r.Hi, 1) || !r.FitFailed {
		t.Errorf("upper end %g, fit failed %v; want +Inf and true", r.Hi, r.FitFailed)
	}
}
