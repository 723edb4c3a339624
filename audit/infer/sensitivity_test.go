package infer

import (
	"context"
	"errors"
	"math"
	"strings"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// rrBruteIDSet bounds θ = l'(post − δ_post) over a grid of post-period
// changes d_t = δ_t − δ_{t−1} (δ_0 = 0) with |d_t| ≤ M̄·max pre |change|,
// the definition of Δ^RM read literally; the grid includes the box's
// corners, where a linear objective peaks.
func rrBruteIDSet(pre, post, l []float64, mbar float64, steps int) (lo, hi float64) {
	full := append(append([]float64(nil), pre...), 0)
	mx := 0.0
	for j := 0; j+1 < len(full); j++ {
		mx = max(mx, math.Abs(full[j+1]-full[j]))
	}
	c := mbar * mx
	tq := len(post)
	idx := make([]int, tq)
	lo, hi = math.Inf(1), math.Inf(-1)
	for {
		dl, lb := 0.0, 0.0
		level := 0.0
		for j := range tq {
			d := -c + 2*c*float64(idx[j])/float64(steps)
			level += d
			dl += l[j] * level
			lb += l[j] * post[j]
		}
		lo, hi = min(lo, lb-dl), max(hi, lb-dl)
		j := 0
		for j < tq {
			idx[j]++
			if idx[j] <= steps {
				break
			}
			idx[j] = 0
			j++
		}
		if j == tq {
			return lo, hi
		}
	}
}

// TestRMIdentifiedSetAgainstGrid: the linear programs' bounds equal a
// brute-force grid search and the closed form l'β_post ∓ c·Σ_s|Σ_{t≥s} l_t|
// (the extreme path moves by ±c in each post period).
func TestRMIdentifiedSetAgainstGrid(t *testing.T) {
	tests := []struct {
		name      string
		pre, post []float64
		l         []float64
		mbar      float64
	}{
		{"mean of two lags", []float64{0.1, -0.05, 0.02}, []float64{-0.3, -0.4}, []float64{0.5, 0.5}, 1},
		{"first lag only", []float64{0.2, 0.05}, []float64{-0.3, -0.4, -0.1}, []float64{1, 0, 0}, 0.5},
		{"last lag, steep", []float64{-0.03, 0.01, 0.04, -0.02}, []float64{0.1, 0.2, 0.6}, []float64{0, 0, 1}, 2.5},
		{"signed target", []float64{0.07}, []float64{0.1, -0.2}, []float64{1, -2}, 1.5},
		{"zero M̄", []float64{0.3, 0.1}, []float64{0.5, 0.7}, []float64{0.5, 0.5}, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			lo, hi, err := RMIdentifiedSet(tc.pre, tc.post, tc.l, tc.mbar)
			if err != nil {
				t.Fatal(err)
			}
			blo, bhi := rrBruteIDSet(tc.pre, tc.post, tc.l, tc.mbar, 20)
			if math.Abs(lo-blo) > 1e-9 || math.Abs(hi-bhi) > 1e-9 {
				t.Errorf("LP [%.10f, %.10f], grid [%.10f, %.10f]", lo, hi, blo, bhi)
			}
			full := append(append([]float64(nil), tc.pre...), 0)
			mx := 0.0
			for j := 0; j+1 < len(full); j++ {
				mx = max(mx, math.Abs(full[j+1]-full[j]))
			}
			w, lb := 0.0, 0.0
			for s := range tc.l {
				ls := 0.0
				for u := s; u < len(tc.l); u++ {
					ls += tc.l[u]
				}
				w += math.Abs(ls)
				lb += tc.l[s] * tc.post[s]
			}
			if c := tc.mbar * mx * w; math.Abs(lo-(lb-c)) > 1e-9 || math.Abs(hi-(lb+c)) > 1e-9 {
				t.Errorf("LP [%.10f, %.10f], closed form [%.10f, %.10f]", lo, hi, lb-c, lb+c)
			}
		})
	}
}

// rrTestStudy is an invented event study with covariance
// σ²(0.5^|i−j|).
func rrTestStudy(pre, post []float64, sigma float64) EventStudy {
	n := len(pre) + len(post)
	cov := mat.NewSymDense(n, nil)
	for i := range n {
		for j := i; j < n; j++ {
			cov.SetSym(i, j, sigma*sigma*math.Pow(0.5, float64(j-i)))
		}
	}
	return EventStudy{Pre: pre, Post: post, Cov: cov}
}

// TestRMStatisticAgainstBruteForce: the dual program's value equals the
// primal min over the nuisance of the largest standardised moment (ternary
// search; the primal is convex in the scalar nuisance), and the truncation
// interval equals the one from enumerating every vertex of the dual
// polytope: V^lo = max γ'S/(1 − γ'c) over vertices with γ'c < 1, V^up = min
// over γ'c > 1 (Andrews, Roth & Pakes 2023, the conditioning event).
func TestRMStatisticAgainstBruteForce(t *testing.T) {
	es := rrTestStudy([]float64{0.05, -0.02, 0.03}, []float64{-0.2, -0.25}, 0.04)
	r, err := newRR(es, []float64{0.5, 0.5}, DefaultRMOptions())
	if err != nil {
		t.Fatal(err)
	}
	finite, basis := 0, 0
	for ci, cone := range rrCones(3, 2, 1.3) {
		mo := r.moments(cone)
		for _, theta := range []float64{-0.4, -0.22, 0, 0.1} {
			m := len(mo.y0)
			y := mo.at(theta)
			eta, g, err := mo.eta(y)
			if err != nil {
				t.Fatal(err)
			}
			primal := func(tau float64) float64 {
				v := math.Inf(-1)
				for i := range m {
					v = max(v, (y[i]-mo.x.At(i, 0)*tau)/mo.sigma[i])
				}
				return v
			}
			a, b := -100.0, 100.0
			for range 300 {
				m1, m2 := a+(b-a)/3, b-(b-a)/3
				if primal(m1) < primal(m2) {
					b = m2
				} else {
					a = m1
				}
			}
			if p := primal((a + b) / 2); math.Abs(p-eta) > 1e-8 {
				t.Errorf("cone %d θ %g: dual %.10f, primal %.10f", ci, theta, eta, p)
			}
			blo, bup := rrBruteTruncation(mo, y, eta, g)
			sgm, c, s, err := mo.conditioning(y, eta, g)
			if err != nil {
				t.Fatal(err)
			}
			if vlo, vup, ok := mo.truncationBasis(g, c, s); ok {
				basis++
				if !rrNear(vlo, blo, 1e-9*(1+math.Abs(blo))) || !rrNear(vup, bup, 1e-9*(1+math.Abs(bup))) {
					t.Errorf("cone %d θ %g: closed form [%g, %g], vertex enumeration [%g, %g]", ci, theta, vlo, vup, blo, bup)
				}
			}
			finite += rrFinite(blo) + rrFinite(bup)
			// the bisection fallback: beyond 10 standard deviations past
			// |η̂| it reports ±Inf
			_, vlo, vup, err := mo.truncationBisect(y, eta, g)
			if err != nil {
				t.Fatal(err)
			}
			if capLo := eta - (10*sgm + math.Abs(eta)); blo < capLo {
				blo = math.Inf(-1)
			}
			if capUp := eta + (10*sgm + math.Abs(eta)); bup > capUp {
				bup = math.Inf(1)
			}
			if !rrNear(vlo, blo, 2e-5*sgm) || !rrNear(vup, bup, 2e-5*sgm) {
				t.Errorf("cone %d θ %g: bisection [%g, %g], vertex enumeration [%g, %g]", ci, theta, vlo, vup, blo, bup)
			}
		}
	}
	// 6 cones × 4 values × 2 ends: most ends must be finite for the check
	// to bite
	if finite < 24 {
		t.Errorf("only %d of 48 truncation ends finite", finite)
	}
	if basis < 12 {
		t.Errorf("closed form used in only %d of 24 tests", basis)
	}
	t.Logf("%d of 48 truncation ends finite; closed form in %d of 24 tests", finite, basis)
}

// rrFinite is 1 for a finite bound.
func rrFinite(x float64) int {
	if math.IsInf(x, 0) {
		return 0
	}
	return 1
}

func rrNear(a, b, tol float64) bool {
	if math.IsInf(a, 0) || math.IsInf(b, 0) {
		return a == b
	}
	return math.Abs(a-b) <= tol
}

// rrBruteTruncation enumerates the vertices of {γ ≥ 0, X'γ = 0, σ'γ = 1}
// (every choice of k+1 moments whose square system has a non-negative
// solution) and returns the truncation interval from them.
func rrBruteTruncation(mo *rrMoments, y []float64, eta float64, g []float64) (float64, float64) {
	m := len(y)
	_, k := mo.x.Dims()
	_, c, s, err := mo.conditioning(y, eta, g) // the definitions of c and S
	if err != nil {
		return math.NaN(), math.NaN()
	}
	lo, up := math.Inf(-1), math.Inf(1)
	idx := make([]int, k+1)
	var rec func(start, depth int)
	rec = func(start, depth int) {
		if depth == k+1 {
			A := mat.NewDense(k+1, k+1, nil)
			for col, i := range idx {
				for j := range k {
					A.Set(j, col, mo.x.At(i, j))
				}
				A.Set(k, col, mo.sigma[i])
			}
			rhs := mat.NewVecDense(k+1, nil)
			rhs.SetVec(k, 1)
			var sol mat.VecDense
			if err := sol.SolveVec(A, rhs); err != nil {
				return
			}
			gs, gc := 0.0, 0.0
			for col, i := range idx {
				if sol.AtVec(col) < -1e-12 {
					return
				}
				gs += sol.AtVec(col) * s[i]
				gc += sol.AtVec(col) * c[i]
			}
			switch {
			case gc < 1-1e-9:
				lo = max(lo, gs/(1-gc))
			case gc > 1+1e-9:
				up = min(up, gs/(1-gc))
			}
			return
		}
		for i := start; i < m; i++ {
			idx[depth] = i
			rec(i+1, depth+1)
		}
	}
	rec(0, 0)
	return lo, up
}

// TestRMParallelTrendsLimit: at M̄ = 0 the post-period bias is zero, so the
// identified set is the point l'β̂_post and the robust set must hold it
// and be no narrower than the plain 95% interval l'β̂_post ± 1.96·se would
// need to be conservative; it must also be finite.
func TestRMParallelTrendsLimit(t *testing.T) {
	es := rrTestStudy([]float64{0.02, -0.01, 0.01}, []float64{-0.3, -0.35}, 0.05)
	l := []float64{0.5, 0.5}
	opts := DefaultRMOptions()
	opts.LFDraws = 100
	ivs, err := RelativeMagnitudes(context.Background(), es, l, []float64{0, 1, 3}, opts)
	if err != nil {
		t.Fatal(err)
	}
	point := -0.325
	if iv := ivs[0]; math.Abs(iv.IDLo-point) > 1e-12 || math.Abs(iv.IDHi-point) > 1e-12 {
		t.Errorf("M̄ 0: identified set [%g, %g], want the point %g", iv.IDLo, iv.IDHi, point)
	}
	for i, iv := range ivs {
		if !(iv.Lo <= iv.IDLo && iv.IDHi <= iv.Hi) || math.IsInf(iv.Lo, 0) || math.IsInf(iv.Hi, 0) {
			t.Errorf("M̄ %g: robust set [%g, %g] does not hold the identified set [%g, %g]", iv.MBar, iv.Lo, iv.Hi, iv.IDLo, iv.IDHi)
		}
		if i > 0 && !(iv.Lo <= ivs[i-1].Lo+1e-6 && iv.Hi >= ivs[i-1].Hi-1e-6) {
			t.Errorf("M̄ %g: robust set [%g, %g] not wider than at M̄ %g [%g, %g]", iv.MBar, iv.Lo, iv.Hi, ivs[i-1].MBar, ivs[i-1].Lo, ivs[i-1].Hi)
		}
		t.Logf("M̄ %.1f: identified [%.4f, %.4f], robust 95%% [%.4f, %.4f]", iv.MBar, iv.IDLo, iv.IDHi, iv.Lo, iv.Hi)
	}
}

// TestRMBreakdownAgreesWithIntervals: the breakdown value separates M̄
// whose robust set excludes zero from those whose set holds it, and the
// sentence says so in plain words.
func TestRMBreakdownAgreesWithIntervals(t *testing.T) {
	es := rrTestStudy([]float64{0.02, -0.03, 0.01}, []float64{-0.25, -0.3}, 0.04)
	l := []float64{0.5, 0.5}
	opts := DefaultRMOptions()
	opts.LFDraws = 100
	ctx := context.Background()
	b, err := RMBreakdownValue(ctx, es, l, opts)
	if err != nil {
		t.Fatal(err)
	}
	if !b.Significant || b.Capped || !(b.MBar > 0) {
		t.Fatalf("breakdown %+v; want a finite positive value", b)
	}
	ivs, err := RelativeMagnitudes(ctx, es, l, []float64{b.MBar - 0.05, b.MBar + 0.05}, opts)
	if err != nil {
		t.Fatal(err)
	}
	if ivs[0].Hi >= 0 {
		t.Errorf("below the breakdown (M̄ %g) the set [%g, %g] holds zero", ivs[0].MBar, ivs[0].Lo, ivs[0].Hi)
	}
	if ivs[1].Hi < 0 {
		t.Errorf("above the breakdown (M̄ %g) the set [%g, %g] excludes zero", ivs[1].MBar, ivs[1].Lo, ivs[1].Hi)
	}
	s := b.Sentence("drop", "pre-import", "post-import")
	if !strings.HasPrefix(s, "the drop holds unless post-import trends diverged more than ") || !strings.HasSuffix(s, " times the largest pre-import change") {
		t.Errorf("sentence %q", s)
	}
	t.Logf("breakdown M̄* = %.3f: %s", b.MBar, s)
}

// TestRMSentence covers the plain-words cases.
func TestRMSentence(t *testing.T) {
	tests := []struct {
		name string
		b    RMBreakdown
		want string
	}{
		{"typical", RMBreakdown{MBar: 1.43, Significant: true}, "the drop holds unless post-import trends diverged more than 1.4 times the largest pre-import change"},
		{"not significant", RMBreakdown{}, "the drop is not distinguishable from no change even if post-import trends stayed exactly parallel"},
		{"capped", RMBreakdown{MBar: 20, Significant: true, Capped: true}, "the drop holds even if post-import trends diverged 20 times the largest pre-import change"},
		{"fragile", RMBreakdown{MBar: 0, Significant: true}, "the drop holds only if post-import trends stayed exactly parallel: any divergence undoes it"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := tc.b.Sentence("drop", "pre-import", "post-import"); got != tc.want {
				t.Errorf("got %q\nwant %q", got, tc.want)
			}
		})
	}
}

// TestRMErrors: unusable input gives errors, not panics.
func TestRMErrors(t *testing.T) {
	good := rrTestStudy([]float64{0.1, 0}, []float64{0.2}, 0.1)
	tests := []struct {
		name string
		es   EventStudy
		l    []float64
		mbar float64
	}{
		{"no leads", EventStudy{Post: []float64{1}, Cov: mat.NewSymDense(1, []float64{1})}, []float64{1}, 1},
		{"target length", good, []float64{1, 1}, 1},
		{"zero target", good, []float64{0}, 1},
		{"covariance size", EventStudy{Pre: []float64{1}, Post: []float64{1}, Cov: mat.NewSymDense(1, []float64{1})}, []float64{1}, 1},
		{"not positive definite", EventStudy{Pre: []float64{1}, Post: []float64{1}, Cov: mat.NewSymDense(2, []float64{1, 2, 2, 1})}, []float64{1}, 1},
		{"negative M̄", good, []float64{1}, -1},
		{"NaN coefficient", rrTestStudy([]float64{math.NaN(), 0}, []float64{0.2}, 0.1), []float64{1}, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := RelativeMagnitudes(context.Background(), tc.es, tc.l, []float64{tc.mbar}, DefaultRMOptions())
			if !errors.Is(err, ErrRMInput) {
				t.Errorf("error %v, want ErrRMInput", err)
			}
		})
	}
}

// TestRMShortcutMatchesFullHybrid: skipping the least-favourable
// simulation where the decision cannot depend on it gives the same
// decisions as always simulating it, on a grid of θ̄ over every cone.
func TestRMShortcutMatchesFullHybrid(t *testing.T) {
	es := rrTestStudy([]float64{0.02, -0.03, 0.01}, []float64{-0.25, -0.3}, 0.04)
	l := []float64{0.5, 0.5}
	opts := DefaultRMOptions()
	opts.LFDraws = 150
	lazy, err := newRR(es, l, opts)
	if err != nil {
		t.Fatal(err)
	}
	full, err := newRR(es, l, opts)
	if err != nil {
		t.Fatal(err)
	}
	full.eager = true
	rejections, skipped := 0, 0
	for _, mb := range []float64{0, 0.7, 1.5} {
		for ci, cone := range rrCones(3, 2, mb) {
			mo := lazy.moments(cone)
			key := rrKey{mb, ci}
			for i := range 31 {
				th := -0.7 + 0.0333*float64(i)
				a, err := lazy.reject(mo, key, th)
				if err != nil {
					t.Fatal(err)
				}
				b, err := full.reject(mo, key, th)
				if err != nil {
					t.Fatal(err)
				}
				if a != b {
					t.Errorf("M̄ %g cone %d θ̄ %g: shortcut rejects %v, full hybrid %v", mb, ci, th, a, b)
				}
				if b {
					rejections++
				}
			}
			if _, ok := lazy.lfMem[key]; !ok {
				skipped++
			}
		}
	}
	if rejections == 0 || rejections == 3*6*31 {
		t.Errorf("%d rejections of %d: the grid does not cross the sets' ends", rejections, 3*6*31)
	}
	t.Logf("%d of %d tests reject; %d of 18 cones never simulated c_LF", rejections, 3*6*31, skipped)
}
