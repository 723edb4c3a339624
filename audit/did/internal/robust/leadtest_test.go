package robust

import (
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestLeadTestSize checks the pre-trend test's size on null data. For G
// independent N(0, Σ) vectors, b the mean and V the covariance of the mean
// from the cluster deviations, Hotelling's T² = b'V⁻¹b satisfies
// T²·(G − q)/(q·(G − 1)) ~ F(q, G − q) exactly (Hotelling 1931; Anderson, An
// Introduction to Multivariate Statistical Analysis, ch. 5 — cited from
// memory). So LeadTest must reject about 5% of null draws at 0.05, while the
// plain chi-square Wald test of all 12 leads from 20 clusters over-rejects.
func TestLeadTestSize(t *testing.T) {
	const G, k, reps = 20, 12, 4000
	rng := rand.New(rand.NewPCG(7, 11))
	rejF, rejChi := 0, 0
	x := make([][]float64, G)
	for rep := 0; rep < reps; rep++ {
		b := make([]float64, k)
		for g := range x {
			x[g] = make([]float64, k)
			prev := 0.0
			for i := range x[g] {
				// correlated leads, as neighbouring months are
				prev = 0.5*prev + rng.NormFloat64()
				x[g][i] = prev
				b[i] += prev / G
			}
		}
		v := mat.NewSymDense(k, nil)
		for i := 0; i < k; i++ {
			for j := i; j < k; j++ {
				s := 0.0
				for g := range x {
					s += (x[g][i] - b[i]) * (x[g][j] - b[j])
				}
				v.SetSym(i, j, s/float64(G*(G-1)))
			}
		}
		if p, ok := LeadTest(b, v, G); ok && p < 0.05 {
			rejF++
		}
		if _, _, p, ok := WaldChi2(b, v); ok && p < 0.05 {
			rejChi++
		}
	}
	rate := float64(rejF) / reps
	// binomial standard error at 5% over 4000 draws is 0.0034: allow 4 of them
	if rate < 0.036 || rate > 0.064 {
		t.Errorf("LeadTest rejects %.3f of null draws, want 0.05", rate)
	}
	if chi := float64(rejChi) / reps; chi < 0.2 {
		t.Errorf("plain Wald test rejects only %.3f: the over-rejection this test guards against is gone?", chi)
	}
	t.Logf("null rejection at 0.05: LeadTest %.3f, chi-square Wald of %d leads %.3f", rate, k, float64(rejChi)/reps)
}
