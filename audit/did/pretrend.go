package did

import (
	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// maxLeadBins is how many groups of consecutive leads the pre-trend test
// compares at most.
const maxLeadBins = 4

// leadTest is the joint test that the pre-period (lead) estimates b, with
// cluster-robust covariance v from G clusters, are all zero.
//
// A Wald test of many leads with a cluster-robust covariance over-rejects
// badly when clusters are few: the k×k covariance is estimated from G cluster
// sums and is nearly singular when k approaches G (Cameron & Miller 2015,
// "A Practitioner's Guide to Cluster-Robust Inference", J. Human Resources,
// section VII.B; Hansen 2007). So the leads are first averaged into at most
// maxLeadBins groups of consecutive event times (b̄ = A b, V̄ = A V A'), and
// the statistic W = b̄'V̄⁻¹b̄ is referred to the F distribution with the
// Hotelling T² correction F = W·(G − q)/(q·(G − 1)) on (q, G − q) degrees of
// freedom, q the number of groups. With G ≤ q no test is possible (ok false).
func leadTest(b []float64, v *mat.SymDense, G int) (p float64, ok bool) {
	k := len(b)
	if k == 0 {
		return 0, false
	}
	q := min(k, maxLeadBins)
	if G <= q {
		q = G - 1
	}
	if q < 1 {
		return 0, false
	}
	// A averages consecutive leads: group j holds leads [j*k/q, (j+1)*k/q).
	a := mat.NewDense(q, k, nil)
	for j := 0; j < q; j++ {
		lo, hi := j*k/q, (j+1)*k/q
		for i := lo; i < hi; i++ {
			a.Set(j, i, 1/float64(hi-lo))
		}
	}
	var bb mat.VecDense
	bb.MulVec(a, mat.NewVecDense(k, b))
	var av mat.Dense
	av.Mul(a, v)
	var vv mat.Dense
	vv.Mul(&av, a.T())
	vs := mat.NewSymDense(q, nil)
	for i := 0; i < q; i++ {
		for j := i; j < q; j++ {
			vs.SetSym(i, j, (vv.At(i, j)+vv.At(j, i))/2)
		}
	}
	w, _, _, ok := waldChi2(bb.RawVector().Data, vs)
	if !ok {
		return 0, false
	}
	f := w * float64(G-q) / (float64(q) * float64(G-1))
	p = distuv.F{D1: float64(q), D2: float64(G - q)}.Survival(f)
	return p, finite(p)
}
