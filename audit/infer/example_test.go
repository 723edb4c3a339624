package infer_test

import (
	"context"
	"encoding/csv"
	"fmt"
	"os"
	"strconv"

	"github.com/loadwake/loadwake/audit/infer"
	"gonum.org/v1/gonum/mat"
)

// The restricted wild cluster bootstrap of the slope in Petersen's test data
// (testdata/petersen.csv, from R's sandwich package), clustered by year:
// ten clusters, so all 2^10 Rademacher sign vectors are enumerated and the
// result is exact and needs no seed.
func ExampleOLS_WildTest() {
	f, err := os.Open("testdata/petersen.csv")
	if err != nil {
		fmt.Println(err)
		return
	}
	defer f.Close()
	recs, err := csv.NewReader(f).ReadAll()
	if err != nil {
		fmt.Println(err)
		return
	}
	recs = recs[1:]
	x := mat.NewDense(len(recs), 2, nil)
	y := make([]float64, len(recs))
	year := make([]int, len(recs))
	for i, r := range recs {
		yr, _ := strconv.Atoi(r[1])
		xv, _ := strconv.ParseFloat(r[2], 64)
		y[i], _ = strconv.ParseFloat(r[3], 64)
		x.Set(i, 0, 1)
		x.Set(i, 1, xv)
		year[i] = yr
	}
	fit, err := infer.FitOLS(infer.Design{X: x, Y: y, Cluster: year})
	if err != nil {
		fmt.Println(err)
		return
	}
	res, err := fit.WildTest(context.Background(), []float64{0, 1}, 1, infer.WildOptions{Weights: infer.Rademacher, Draws: 1024})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("slope %.4f, CR1 se %.4f, t against 1: %.3f\n", res.Estimate, res.SE, res.T)
	fmt.Printf("%d draws (enumerated: %v), p = %.4f\n", res.Draws, res.Enumerated, res.P)
	fmt.Printf("95%% interval by test inversion: [%.4f, %.4f]\n", res.Lower, res.Upper)
	// Output:
	// slope 1.0348, CR1 se 0.0334, t against 1: 1.043
	// 1024 draws (enumerated: true), p = 0.3262
	// 95% interval by test inversion: [0.9571, 1.1095]
}
