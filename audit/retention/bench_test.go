package retention_test

import (
	"context"
	"math/rand/v2"
	"testing"

	"github.com/loadwake/loadwake/audit/retention"
)

// BenchmarkEstimate computes the retention section of one sample of the
// "many planted" Monte Carlo design (24 import areas in 3 waves, 48
// comparison areas, some 9,000 stacked newcomers) with 999 bootstrap draws,
// and reports newcomers per second.
func BenchmarkEstimate(b *testing.B) {
	d := mcDesigns()[2].d
	s := d.draw(rand.New(rand.NewPCG(1, 99)))
	b.ReportAllocs()
	n := 0
	for b.Loop() {
		if _, err := retention.Estimate(context.Background(), s, retention.Options{Draws: 999}); err != nil {
			b.Fatal(err)
		}
		n += len(s.Newcomers)
	}
	b.ReportMetric(float64(n)/b.Elapsed().Seconds(), "newcomers/s")
	b.ReportMetric(float64(len(s.Newcomers)), "newcomers")
}
