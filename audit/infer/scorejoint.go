package infer

import (
	"fmt"

	"gonum.org/v1/gonum/mat"
)

// JointScoreResult is the outcome of JointScoreTest.
type JointScoreResult struct {
	Stat       float64      // the score statistic S (chi-square scale, q restrictions)
	Q          int          // restrictions tested
	P          float64      // bootstrap p-value: share of S* at least S
	Weights    ScoreWeights // the weights used (never auto)
	Draws      int          // bootstrap draws, or weight vectors enumerated
	Enumerated bool         // every weight vector was used: P is deterministic
	Clusters   int          // G
}

// JointScoreTest is the score bootstrap of q joint linear restrictions Rβ =
// r at a fit made under them (Kline & Santos 2012 treat several restrictions
// alike): with c_g = R H⁻¹ s_g the clusters' contributions to one Newton step
// in the restricted directions,
//
//	S = (Σ_g c_g)' (f Σ_g c_g c_g')⁻¹ (Σ_g c_g)
//	S*(v) = (Σ_g v_g c_g)' (f Σ_g v_g² c_g c_g')⁻¹ (Σ_g v_g c_g)
//
// and P is the share of draws with S* ≥ S. With one restriction S = t² of
// ScoreBootstrap's statistic at the same null, and the two p-values agree.
// Weights, enumeration and seeding are those of ScoreBootstrap (opts.Level,
// Tol and MaxSE are not used). R is q×k with q ≤ k and full row rank; fit
// is the restricted fit (its Scores G×k and Hessian k×k).
func JointScoreTest(fit ScoreFit, R *mat.Dense, opts ScoreOptions) (*JointScoreResult, error) {
	if opts.Draws < 1 {
		return nil, fmt.Errorf("%w: need draws ≥ 1", ErrScoreInput)
	}
	c, f, q, err := jointContrib(fit, R)
	if err != nil {
		return nil, err
	}
	stat, err := observedStat(c, f, q)
	if err != nil {
		return nil, err
	}
	g, _ := c.Dims()
	sb := &scoreBoot{opts: opts}
	sb.draw(g)
	hits := 0
	for b := range sb.b {
		s, ok := jointStat(c, sb.v[b*g:(b+1)*g], f, q)
		if ok && s >= stat*(1-1e-10) {
			hits++
		}
	}
	r := &JointScoreResult{Stat: stat, Q: q, Weights: sb.weights, Draws: sb.b, Enumerated: sb.enumerated, Clusters: g}
	if sb.enumerated {
		r.P = float64(hits) / float64(sb.b)
	} else {
		r.P = float64(hits+1) / float64(sb.b+1)
	}
	return r, nil
}

// JointScoreStat is JointScoreTest's statistic S alone, for tests that
// compare it across reassignments (a randomization test) instead of
// bootstrapping it.
func JointScoreStat(fit ScoreFit, R *mat.Dense) (float64, error) {
	c, f, q, err := jointContrib(fit, R)
	if err != nil {
		return 0, err
	}
	return observedStat(c, f, q)
}

// observedStat is S with every weight 1.
func observedStat(c *mat.Dense, f float64, q int) (float64, error) {
	g, _ := c.Dims()
	ones := make([]float64, g)
	for i := range ones {
		ones[i] = 1
	}
	stat, ok := jointStat(c, ones, f, q)
	if !ok {
		return 0, fmt.Errorf("%w: the clusters' score contributions do not span the %d restrictions", ErrScoreInput, q)
	}
	return stat, nil
}

// jointContrib returns the clusters' contributions c_g = R H⁻¹ s_g (rows of
// a G×q matrix), the small-sample factor and q.
func jointContrib(fit ScoreFit, R *mat.Dense) (*mat.Dense, float64, int, error) {
	if R == nil || fit.Scores == nil || fit.Hessian == nil {
		return nil, 0, 0, fmt.Errorf("%w: need restrictions, scores and a Hessian", ErrScoreInput)
	}
	q, k := R.Dims()
	g, ks := fit.Scores.Dims()
	if ks != k || fit.Hessian.SymmetricDim() != k || q < 1 || q > k {
		return nil, 0, 0, fmt.Errorf("%w: %d restrictions on %d parameters, scores have %d columns, Hessian %d", ErrScoreInput, q, k, ks, fit.Hessian.SymmetricDim())
	}
	if g < 2 {
		return nil, 0, 0, fmt.Errorf("%w: %d clusters; need at least 2", ErrScoreInput, g)
	}
	var ch mat.Cholesky
	if !ch.Factorize(fit.Hessian) {
		return nil, 0, 0, fmt.Errorf("%w: Hessian not positive definite", ErrScoreInput)
	}
	var hinvRt mat.Dense // k×q = H⁻¹ R'
	if err := ch.SolveTo(&hinvRt, R.T()); err != nil {
		return nil, 0, 0, fmt.Errorf("%w: Hessian: %v", ErrScoreInput, err)
	}
	c := &mat.Dense{} // g×q, row g is c_g'
	c.Mul(fit.Scores, &hinvRt)
	f := float64(g) / float64(g-1)
	if fit.NObs > 0 {
		if fit.NObs <= fit.NParams {
			return nil, 0, 0, fmt.Errorf("%w: %d observations for %d parameters", ErrScoreInput, fit.NObs, fit.NParams)
		}
		f *= float64(fit.NObs-1) / float64(fit.NObs-fit.NParams)
	}
	return c, f, q, nil
}

// jointStat is (Σ v_g c_g)'(f Σ v_g² c_g c_g')⁻¹(Σ v_g c_g); ok is false when
// the middle matrix is singular.
func jointStat(c *mat.Dense, v []float64, f float64, q int) (float64, bool) {
	g, _ := c.Dims()
	sum := make([]float64, q)
	mid := mat.NewSymDense(q, nil)
	for i := range g {
		row := c.RawRowView(i)
		for a := range q {
			sum[a] += v[i] * row[a]
			for b := a; b < q; b++ {
				mid.SetSym(a, b, mid.At(a, b)+f*v[i]*v[i]*row[a]*row[b])
			}
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(mid) {
		return 0, false
	}
	x := mat.NewVecDense(q, nil)
	if err := ch.SolveVecTo(x, mat.NewVecDense(q, sum)); err != nil {
		return 0, false
	}
	return mat.Dot(x, mat.NewVecDense(q, sum)), true
}
