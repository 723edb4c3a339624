package infer

import (
	"fmt"
	"sort"
)

// Holm returns Holm's step-down adjusted p-values for the family p, in the
// order given (Holm 1979, "A simple sequentially rejective multiple test
// procedure", Scandinavian Journal of Statistics 6(2)): with p sorted
// ascending, adj(i) = max over j ≤ i of min(1, (m − j + 1)·p(j)). Rejecting
// where adj ≤ α controls the family-wise error rate at α under any
// dependence between the tests. It matches R's p.adjust(p, method = "holm").
// A NaN or a value outside [0, 1] is an error naming its index.
func Holm(p []float64) ([]float64, error) {
	m := len(p)
	order := make([]int, m)
	for i, v := range p {
		if !(v >= 0 && v <= 1) {
			return nil, fmt.Errorf("%w: p-value %v at index %d not in [0, 1]", ErrRequest, v, i)
		}
		order[i] = i
	}
	sort.SliceStable(order, func(a, b int) bool { return p[order[a]] < p[order[b]] })
	adj := make([]float64, m)
	running := 0.0
	for j, i := range order {
		running = max(running, min(1, float64(m-j)*p[i]))
		adj[i] = running
	}
	return adj, nil
}
