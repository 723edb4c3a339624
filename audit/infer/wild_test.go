package infer

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// wcrToy is a small clustered design made up for the oracle checks (a
// simulation draw, not data): clusters of unequal size, the first `treated`
// of them treated, a covariate, WLS weights and cluster-correlated errors.
type wcrToy struct {
	x  *mat.Dense
	y  []float64
	w  []float64
	cl []int
}

func wcrMakeToy(tb testing.TB, G, treated int, seed uint64) wcrToy {
	tb.Helper()
	rng := rand.New(rand.NewPCG(seed, 7))
	var t wcrToy
	var rows []float64
	for g := range G {
		ng := 3 + rng.IntN(10)
		ce := rng.NormFloat64()
		for range ng {
			d := 0.0
			if g < treated {
				d = 1
			}
			z := rng.NormFloat64()
			rows = append(rows, 1, d, z)
			t.y = append(t.y, 0.5+0.2*d+0.7*z+ce+rng.NormFloat64()*(1+float64(g%3)))
			t.w = append(t.w, 0.5+1.5*rng.Float64())
			t.cl = append(t.cl, 100-3*g) // ids deliberately not 0..G-1 nor sorted
		}
	}
	t.x = mat.NewDense(len(t.y), 3, rows)
	return t
}

// wcrNaive fits WLS by solving the normal equations and returns β and the CR1
// covariance computed from explicit residuals, with no shared code.
func wcrNaive(tb testing.TB, x *mat.Dense, y, w []float64, cl []int) ([]float64, *mat.Dense) {
	tb.Helper()
	n, k := x.Dims()
	xtx := mat.NewDense(k, k, nil)
	xty := mat.NewVecDense(k, nil)
	for i := range n {
		for a := range k {
			xty.SetVec(a, xty.AtVec(a)+w[i]*x.At(i, a)*y[i])
			for b := range k {
				xtx.Set(a, b, xtx.At(a, b)+w[i]*x.At(i, a)*x.At(i, b))
			}
		}
	}
	var beta mat.VecDense
	if err := beta.SolveVec(xtx, xty); err != nil {
		tb.Fatal(err)
	}
	var inv mat.Dense
	if err := inv.Inverse(xtx); err != nil {
		tb.Fatal(err)
	}
	sc := map[int][]float64{}
	for i := range n {
		u := y[i]
		for a := range k {
			u -= x.At(i, a) * beta.AtVec(a)
		}
		if sc[cl[i]] == nil {
			sc[cl[i]] = make([]float64, k)
		}
		for a := range k {
			sc[cl[i]][a] += w[i] * x.At(i, a) * u
		}
	}
	meat := mat.NewDense(k, k, nil)
	for _, s := range sc {
		for a := range k {
			for b := range k {
				meat.Set(a, b, meat.At(a, b)+s[a]*s[b])
			}
		}
	}
	G := float64(len(sc))
	adj := G / (G - 1) * float64(n-1) / float64(n-k)
	var v, tmp mat.Dense
	tmp.Mul(&inv, meat)
	v.Mul(&tmp, &inv)
	v.Scale(adj, &v)
	return beta.RawVector().Data, &v
}

// wcrBruteRefits imposes Rβ = r by restricted least squares
// (β̃ = β̂ − A R'(R A R')⁻¹(Rβ̂ − r), A = (X'WX)⁻¹; Greene, Econometric
// Analysis, ch. 5, from memory), builds the bootstrap sample of every weight
// row of v (clusters in ascending id order), refits it from scratch with
// wcrNaive and returns each refit's β* and CR1 covariance.
func wcrBruteRefits(tb testing.TB, toy wcrToy, R *mat.Dense, r []float64, v *mat.Dense) ([][]float64, []*mat.Dense) {
	tb.Helper()
	n, k := toy.x.Dims()
	beta, _ := wcrNaive(tb, toy.x, toy.y, toy.w, toy.cl)
	xtx := mat.NewDense(k, k, nil)
	for i := range n {
		for p := range k {
			for q := range k {
				xtx.Set(p, q, xtx.At(p, q)+toy.w[i]*toy.x.At(i, p)*toy.x.At(i, q))
			}
		}
	}
	var inv mat.Dense
	if err := inv.Inverse(xtx); err != nil {
		tb.Fatal(err)
	}
	var ar, rar, rarInv mat.Dense
	ar.Mul(&inv, R.T())
	rar.Mul(R, &ar)
	if err := rarInv.Inverse(&rar); err != nil {
		tb.Fatal(err)
	}
	var gap, lam, corr mat.VecDense
	gap.MulVec(R, mat.NewVecDense(k, beta))
	gap.SubVec(&gap, mat.NewVecDense(len(r), r))
	lam.MulVec(&rarInv, &gap)
	corr.MulVec(&ar, &lam)
	rest := make([]float64, k)
	for j := range k {
		rest[j] = beta[j] - corr.AtVec(j)
	}
	idx := map[int]int{}
	for _, id := range wcrSortedIDs(toy.cl) {
		idx[id] = len(idx)
	}
	nb, _ := v.Dims()
	betas := make([][]float64, nb)
	covs := make([]*mat.Dense, nb)
	ys := make([]float64, n)
	for b := range nb {
		for i := range n {
			fit := 0.0
			for j := range k {
				fit += toy.x.At(i, j) * rest[j]
			}
			ys[i] = fit + v.At(b, idx[toy.cl[i]])*(toy.y[i]-fit)
		}
		betas[b], covs[b] = wcrNaive(tb, toy.x, ys, toy.w, toy.cl)
	}
	return betas, covs
}

// wcrBruteT returns the bootstrap t statistics of a'β = r by brute force.
func wcrBruteT(tb testing.TB, toy wcrToy, a []float64, r float64, v *mat.Dense) []float64 {
	tb.Helper()
	betas, covs := wcrBruteRefits(tb, toy, mat.NewDense(1, len(a), a), []float64{r}, v)
	av := mat.NewVecDense(len(a), a)
	out := make([]float64, len(betas))
	for b := range betas {
		out[b] = (mat.Dot(av, mat.NewVecDense(len(a), betas[b])) - r) / math.Sqrt(mat.Inner(av, covs[b], av))
	}
	return out
}

// wcrCountP returns the symmetric and equal-tailed p-values of t against ts,
// with the package's tie tolerance.
func wcrCountP(t float64, ts []float64) (float64, float64) {
	tau := wcrTol * (math.Abs(t) + 1e-3)
	var abs, lo, hi int
	for _, s := range ts {
		if math.Abs(s) >= math.Abs(t)-tau {
			abs++
		}
		if s <= t+tau {
			lo++
		}
		if s >= t-tau {
			hi++
		}
	}
	B := float64(len(ts))
	return float64(abs) / B, math.Min(1, 2*float64(min(lo, hi))/B)
}

func TestWildTestAgainstBruteForce(t *testing.T) {
	cases := []struct {
		name      string
		G, tr     int
		a         []float64
		r         float64
		weights   WeightScheme
		draws     int
		enumerate bool
	}{
		{"rademacher enumerated, treatment coefficient", 8, 3, []float64{0, 1, 0}, 0.2, Rademacher, 999, true},
		{"rademacher enumerated, combination", 9, 2, []float64{0, 1, -0.5}, 0.1, Rademacher, 512, true},
		{"rademacher enumerated, null far out", 7, 4, []float64{0, 1, 0}, 3, Rademacher, 128, true},
		{"webb random", 10, 2, []float64{0, 1, 0}, 0, Webb, 199, false},
		{"rademacher random", 14, 5, []float64{1, 0.5, 0}, 0.4, Rademacher, 199, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			toy := wcrMakeToy(t, c.G, c.tr, uint64(c.G*31+c.tr))
			fit, err := FitOLS(Design{X: toy.x, Y: toy.y, Weights: toy.w, Cluster: toy.cl})
			if err != nil {
				t.Fatal(err)
			}
			o := WildOptions{Draws: c.draws, Weights: c.weights, Seed: 11}
			res, err := fit.WildTest(context.Background(), c.a, c.r, o)
			if err != nil {
				t.Fatal(err)
			}
			if res.Enumerated != c.enumerate {
				t.Fatalf("enumerated %v, want %v", res.Enumerated, c.enumerate)
			}
			// Replay the same weights for the oracle.
			v := mat.NewDense(res.Draws, c.G, nil)
			oo, _ := o.withDefaults(c.G)
			wcrFill(v, 0, res.Enumerated, c.weights, oo.Rand)
			brute := wcrBruteT(t, toy, c.a, c.r, v)
			for b, want := range brute {
				if got := res.TStar[b]; math.Abs(got-want) > 1e-8*(1+math.Abs(want)) {
					t.Fatalf("draw %d: t* %v, brute force %v", b, got, want)
				}
			}
			sym, et := wcrCountP(res.T, brute)
			if math.Abs(res.PSymmetric-sym) > 1e-10 || math.Abs(res.PEqualTailed-et) > 1e-10 {
				t.Fatalf("p = %v / %v, brute force %v / %v", res.PSymmetric, res.PEqualTailed, sym, et)
			}
			if c.enumerate {
				// Draw 0 (all +1) reproduces the sample's t exactly.
				if math.Abs(res.TStar[0]-res.T) > 1e-9*(1+math.Abs(res.T)) {
					t.Fatalf("all-plus draw t* %v, sample t %v", res.TStar[0], res.T)
				}
			}
			beta, cov := wcrNaive(t, toy.x, toy.y, toy.w, toy.cl)
			av := mat.NewVecDense(3, c.a)
			wantT := (mat.Dot(av, mat.NewVecDense(3, beta)) - c.r) / math.Sqrt(mat.Inner(av, cov, av))
			if math.Abs(res.T-wantT) > 1e-10*(1+math.Abs(wantT)) {
				t.Fatalf("t %v, naive %v", res.T, wantT)
			}
		})
	}
}

func TestWildIntervalEndsAtAlpha(t *testing.T) {
	cases := []struct {
		name    string
		G, tr   int
		weights WeightScheme
		draws   int
		tail    Tail
		level   float64
	}{
		{"enumerated symmetric", 11, 4, Rademacher, 4096, Symmetric, 0.95},
		{"enumerated equal-tailed", 11, 4, Rademacher, 4096, EqualTailed, 0.9},
		{"webb symmetric", 20, 3, Webb, 999, Symmetric, 0.95},
		{"rademacher equal-tailed", 30, 12, Rademacher, 999, EqualTailed, 0.95},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			toy := wcrMakeToy(t, c.G, c.tr, uint64(c.G))
			fit, err := FitOLS(Design{X: toy.x, Y: toy.y, Weights: toy.w, Cluster: toy.cl})
			if err != nil {
				t.Fatal(err)
			}
			res, err := fit.WildTest(context.Background(), []float64{0, 1, 0}, 0, WildOptions{Draws: c.draws, Weights: c.weights, Tail: c.tail, Level: c.level, Seed: 3})
			if err != nil {
				t.Fatal(err)
			}
			alpha := 1 - c.level
			if math.IsInf(res.Lower, 0) || math.IsInf(res.Upper, 0) {
				t.Fatalf("unbounded interval [%v, %v]", res.Lower, res.Upper)
			}
			if got := res.PAt(res.Estimate); c.tail == Symmetric && got != 1 {
				t.Errorf("p at the estimate = %v, want 1", got)
			}
			step := 1 / float64(res.Draws)
			eps := 1e-9 * res.SE
			for _, end := range []struct {
				name              string
				at, inside, outer float64
			}{
				{"lower", res.Lower, res.Lower + eps, res.Lower - eps},
				{"upper", res.Upper, res.Upper - eps, res.Upper + eps},
			} {
				pin, pout := res.PAt(end.inside), res.PAt(end.outer)
				// The p-value function is a step function: just inside the end it
				// is the smallest attainable value above alpha, just outside at
				// most alpha.
				if !(pin > alpha && pout <= alpha) {
					t.Errorf("%s end %v: p inside %v, outside %v, alpha %v", end.name, end.at, pin, pout, alpha)
				}
				if pin-alpha > 2*step+1e-12 || alpha-pout > 2*step+1e-12 {
					t.Errorf("%s end %v: p %v / %v not within two steps (%v) of alpha %v", end.name, end.at, pin, pout, step, alpha)
				}
			}
			// Same procedure: every null inside the interval is accepted at
			// alpha, every null on a grid outside it rejected.
			for i := -40; i <= 40; i++ {
				r0 := res.Estimate + float64(i)*res.SE/5
				in := r0 > res.Lower && r0 < res.Upper
				if p := res.PAt(r0); in != (p > alpha) {
					t.Errorf("null %v: in interval %v but p %v (alpha %v)", r0, in, p, alpha)
				}
			}
		})
	}
}

func TestAbsorbMatchesDummies(t *testing.T) {
	toy := wcrMakeToy(t, 9, 3, 5)
	n, _ := toy.x.Dims()
	// Fixed-effect groups nested in clusters: two per cluster.
	grp := make([]int, n)
	ids := map[int]int{}
	for i := range n {
		grp[i] = toy.cl[i]*2 + i%2
		if _, ok := ids[grp[i]]; !ok {
			ids[grp[i]] = len(ids)
		}
	}
	// Explicit dummies (no intercept: the dummies span it), treatment and z.
	xd := mat.NewDense(n, len(ids)+2, nil)
	xa := mat.NewDense(n, 2, nil)
	for i := range n {
		xd.Set(i, ids[grp[i]], 1)
		xd.Set(i, len(ids), toy.x.At(i, 1))
		xd.Set(i, len(ids)+1, toy.x.At(i, 2))
		xa.Set(i, 0, toy.x.At(i, 1))
		xa.Set(i, 1, toy.x.At(i, 2))
	}
	// Within-cluster variation in the treatment: treat half the rows of
	// treated clusters only, so that the dummy is not absorbed.
	for i := range n {
		if toy.x.At(i, 1) == 1 && i%3 == 0 {
			xd.Set(i, len(ids), 0)
			xa.Set(i, 0, 0)
		}
	}
	full, err := FitOLS(Design{X: xd, Y: toy.y, Weights: toy.w, Cluster: toy.cl})
	if err != nil {
		t.Fatal(err)
	}
	abs, err := FitOLS(Design{X: xa, Y: toy.y, Weights: toy.w, Cluster: toy.cl, Absorb: grp})
	if err != nil {
		t.Fatal(err)
	}
	if full.K != abs.K || full.N != abs.N {
		t.Fatalf("K, N = %d, %d with dummies, %d, %d absorbed", full.K, full.N, abs.K, abs.N)
	}
	af := make([]float64, len(ids)+2)
	af[len(ids)] = 1
	o := WildOptions{Weights: Rademacher, Draws: 600}
	rf, err := full.WildTest(context.Background(), af, 0.1, o)
	if err != nil {
		t.Fatal(err)
	}
	ra, err := abs.WildTest(context.Background(), []float64{1, 0}, 0.1, o)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(rf.T-ra.T) > 1e-9 || rf.P != ra.P || math.Abs(rf.Lower-ra.Lower) > 1e-8 || math.Abs(rf.Upper-ra.Upper) > 1e-8 {
		t.Fatalf("dummies: t %v p %v [%v, %v]; absorbed: t %v p %v [%v, %v]", rf.T, rf.P, rf.Lower, rf.Upper, ra.T, ra.P, ra.Lower, ra.Upper)
	}
	for b := range rf.TStar {
		if math.Abs(rf.TStar[b]-ra.TStar[b]) > 1e-8*(1+math.Abs(rf.TStar[b])) {
			t.Fatalf("draw %d: t* %v with dummies, %v absorbed", b, rf.TStar[b], ra.TStar[b])
		}
	}
	// A group that spans two clusters is refused.
	bad := append([]int(nil), grp...)
	bad[0] = grp[n-1]
	if _, err := FitOLS(Design{X: xa, Y: toy.y, Weights: toy.w, Cluster: toy.cl, Absorb: bad}); err == nil {
		t.Fatal("group spanning clusters accepted")
	}
}

// wcrSortedIDs returns the distinct cluster ids in ascending order, the
// order of the bootstrap's weight columns.
func wcrSortedIDs(cl []int) []int {
	ids := append([]int(nil), cl...)
	sort.Ints(ids)
	out := ids[:0]
	for i, id := range ids {
		if i == 0 || id != ids[i-1] {
			out = append(out, id)
		}
	}
	return out
}

// TestWildIntervalAgreesWithP runs many small designs with few treated
// clusters, where acceptance regions are least regular, and checks that the
// tested null lies inside the interval exactly when p > alpha.
func TestWildIntervalAgreesWithP(t *testing.T) {
	for _, ws := range []WeightScheme{Rademacher, Webb} {
		t.Run(ws.String(), func(t *testing.T) {
			for seed := range uint64(150) {
				toy := wcrMakeToy(t, 10+int(seed%6), 1+int(seed%3), seed)
				fit, err := FitOLS(Design{X: toy.x, Y: toy.y, Weights: toy.w, Cluster: toy.cl})
				if err != nil {
					t.Fatal(err)
				}
				r0 := fit.Beta[1] + fit.SE([]float64{0, 1, 0})*float64(int(seed%9)-4)/1.5
				res, err := fit.WildTest(context.Background(), []float64{0, 1, 0}, r0, WildOptions{Weights: ws, Draws: 199, Seed: seed, Tail: Tail(seed % 2)})
				if err != nil {
					t.Fatal(err)
				}
				if in := r0 > res.Lower && r0 < res.Upper; in != (res.P > 0.05) {
					t.Fatalf("seed %d: null %v in [%v, %v] is %v but p = %v", seed, r0, res.Lower, res.Upper, in, res.P)
				}
			}
		})
	}
}

func TestChooseByTreatedClusters(t *testing.T) {
	cases := []struct {
		treated, clusters int
		weights           WeightScheme
		method            Method
	}{
		{1, 40, Webb, MethodRandomization},
		{3, 200, Webb, MethodRandomization},
		{4, 40, Webb, MethodWildWebb},
		{11, 400, Webb, MethodWildWebb},
		{12, 40, Rademacher, MethodWildRademacher},
		{20, 40, Rademacher, MethodWildRademacher},
		{37, 40, Webb, MethodRandomization}, // three untreated clusters
		{30, 40, Webb, MethodWildWebb},      // ten untreated clusters
	}
	for _, c := range cases {
		t.Run(fmt.Sprintf("%d of %d", c.treated, c.clusters), func(t *testing.T) {
			if got := ChooseWeights(c.treated, c.clusters); got != c.weights {
				t.Errorf("weights %v, want %v", got, c.weights)
			}
			if got := ChooseMethod(c.treated, c.clusters); got != c.method {
				t.Errorf("method %v, want %v", got, c.method)
			}
		})
	}
}

func TestWildBadRequest(t *testing.T) {
	toy := wcrMakeToy(t, 8, 3, 1)
	fit, err := FitOLS(Design{X: toy.x, Y: toy.y, Weights: toy.w, Cluster: toy.cl})
	if err != nil {
		t.Fatal(err)
	}
	ctx := context.Background()
	cases := []struct {
		name string
		a    []float64
		r    float64
		o    WildOptions
	}{
		{"short restriction", []float64{0, 1}, 0, WildOptions{Weights: Webb}},
		{"zero restriction", []float64{0, 0, 0}, 0, WildOptions{Weights: Webb}},
		{"NaN null", []float64{0, 1, 0}, math.NaN(), WildOptions{Weights: Webb}},
		{"level", []float64{0, 1, 0}, 0, WildOptions{Weights: Webb, Level: 1.5}},
		{"negative draws", []float64{0, 1, 0}, 0, WildOptions{Weights: Webb, Draws: -1}},
		{"auto without treated count", []float64{0, 1, 0}, 0, WildOptions{}},
		{"more treated than clusters", []float64{0, 1, 0}, 0, WildOptions{TreatedClusters: 9}},
		{"unknown weights", []float64{0, 1, 0}, 0, WildOptions{Weights: WeightScheme(7)}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if _, err := fit.WildTest(ctx, c.a, c.r, c.o); !errors.Is(err, ErrRequest) {
				t.Fatalf("WildTest error %v, want ErrRequest", err)
			}
			if len(c.a) == 3 && !math.IsNaN(c.r) && c.a[1] != 0 {
				if _, err := fit.WildWald(ctx, mat.NewDense(1, 3, c.a), nil, c.o); !errors.Is(err, ErrRequest) {
					t.Fatalf("WildWald error %v, want ErrRequest", err)
				}
			}
		})
	}
	cctx, cancel := context.WithCancel(ctx)
	cancel()
	if _, err := fit.WildTest(cctx, []float64{0, 1, 0}, 0, WildOptions{Weights: Webb}); !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled WildTest: %v", err)
	}
	if _, err := fit.WildWald(cctx, mat.NewDense(1, 3, []float64{0, 1, 0}), nil, WildOptions{Weights: Webb}); !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled WildWald: %v", err)
	}
}
