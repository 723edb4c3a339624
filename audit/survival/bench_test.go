package survival

import (
	"context"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// BenchmarkCoxLung fits the stratified, clustered Efron model of
// TestCoxLung (R's lung data, 226 patients) and reports subjects per second.
func BenchmarkCoxLung(b *testing.B) {
	l := loadLung(b)
	x := mat.NewDense(len(l.time), 3, nil)
	for i := range l.time {
		x.Set(i, 0, l.age[i])
		x.Set(i, 1, l.karno[i])
		x.Set(i, 2, float64(l.sex[i]))
	}
	d := CoxData{Time: l.time, Event: l.event, X: x, Strata: l.ecog, Cluster: l.inst}
	b.ReportAllocs()
	n := 0
	for b.Loop() {
		if _, err := Cox(context.Background(), d, CoxOptions{}); err != nil {
			b.Fatal(err)
		}
		n += len(l.time)
	}
	b.ReportMetric(float64(n)/b.Elapsed().Seconds(), "subjects/s")
}
