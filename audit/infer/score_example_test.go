package infer_test

import (
	"context"
	"fmt"

	"github.com/loadwake/loadwake/audit/infer"
	"gonum.org/v1/gonum/mat"
)

// The mean of clustered observations as an M-estimator: ℓ(μ) = −½Σ(y−μ)²,
// so the restricted fit at μ = b0 is b0 itself, cluster g's score is
// Σ_{i∈g}(y_i − b0) and the Hessian is the number of observations. With 8
// clusters and Rademacher weights all 256 sign vectors are enumerated and
// the result is exact.
func ExampleScoreBootstrap() {
	clusters := [][]float64{{1.2, 0.8}, {2.1, 1.7, 2.4}, {0.3}, {1.1, 1.4}, {2.8, 2.2}, {0.9, 1.3, 1.0}, {1.9}, {1.6, 2.0}}
	fit := func(ctx context.Context, a []float64, b0 float64) (infer.ScoreFit, error) {
		s := mat.NewDense(len(clusters), 1, nil)
		n := 0
		for g, ys := range clusters {
			for _, y := range ys {
				s.Set(g, 0, s.At(g, 0)+y-b0/a[0])
				n++
			}
		}
		return infer.ScoreFit{Scores: s, Hessian: mat.NewSymDense(1, []float64{float64(n)})}, nil
	}
	sum, n := 0.0, 0
	for _, ys := range clusters {
		for _, y := range ys {
			sum += y
			n++
		}
	}
	opts := infer.DefaultScoreOptions()
	opts.Weights = infer.ScoreRademacher
	r, err := infer.ScoreBootstrap(context.Background(), fit, []float64{1}, sum/float64(n), 1, opts)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("mean %.3f, se %.3f\n", sum/float64(n), r.SE)
	fmt.Printf("H0 mean = 1: t %.3f, p %.4f (%d sign vectors, exact %v)\n", r.Stat, r.P, r.Draws, r.Enumerated)
	fmt.Printf("95%% interval [%.3f, %.3f]\n", r.Lo, r.Hi)
	// The mean and se agree with R 4.2.2 sandwich::vcovCL(lm(y ~ 1),
	// type = "HC0", cadjust = TRUE): 1.54375, 0.2278726; t and p with an R
	// enumeration of the 256 sign vectors: 1.682706, 0.078125.

	// Output:
	// mean 1.544, se 0.228
	// H0 mean = 1: t 1.683, p 0.0781 (256 sign vectors, exact true)
	// 95% interval [0.960, 2.114]
}
