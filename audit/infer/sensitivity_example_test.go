package infer_test

import (
	"context"
	"fmt"

	"github.com/loadwake/loadwake/audit/infer"
	"gonum.org/v1/gonum/mat"
)

// An invented event study of a log outcome: three leads close to zero and
// two lags near −0.3, standard errors 0.04 with correlation 0.5^|i−j|.
// The target is the mean of the lags.
func ExampleRMBreakdownValue() {
	pre, post := []float64{0.02, -0.03, 0.01}, []float64{-0.25, -0.3}
	cov := mat.NewSymDense(5, nil)
	for i := range 5 {
		for j := i; j < 5; j++ {
			v := 0.04 * 0.04
			for range j - i {
				v *= 0.5
			}
			cov.SetSym(i, j, v)
		}
	}
	es := infer.EventStudy{Pre: pre, Post: post, Cov: cov}
	opts := infer.DefaultRMOptions()
	b, err := infer.RMBreakdownValue(context.Background(), es, []float64{0.5, 0.5}, opts)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("M̄* = %.2f\n", b.MBar)
	fmt.Println(b.Sentence("drop", "pre-import", "post-import"))
	// Output:
	// M̄* = 1.53
	// the drop holds unless post-import trends diverged more than 1.5 times the largest pre-import change
}
