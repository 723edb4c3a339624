package infer

import (
	"errors"
	"math"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/reftest"
)

// TestHolmAgainstR checks Holm's adjustment against R 4.2.2
// p.adjust(method = "holm") (testdata/holm_ref.csv).
func TestHolmAgainstR(t *testing.T) {
	rows := wcrRows(t, "holm_ref.csv")
	p := make([]float64, len(rows))
	want := make([]float64, len(rows))
	for i, r := range rows {
		p[i], want[i] = reftest.Atof(t, r[0]), reftest.Atof(t, r[1])
	}
	got, err := Holm(p)
	if err != nil {
		t.Fatal(err)
	}
	for i := range want {
		if math.Abs(got[i]-want[i]) > 1e-12 {
			t.Errorf("p[%d] = %v: holm %v, R %v", i, p[i], got[i], want[i])
		}
	}
}

func TestHolmBadInput(t *testing.T) {
	for _, c := range []struct {
		name string
		p    []float64
	}{{"nan", []float64{0.1, math.NaN()}}, {"above one", []float64{1.5}}, {"negative", []float64{-0.1}}} {
		t.Run(c.name, func(t *testing.T) {
			if _, err := Holm(c.p); !errors.Is(err, ErrRequest) {
				t.Fatalf("error %v, want ErrRequest", err)
			}
		})
	}
	if got, err := Holm(nil); err != nil || len(got) != 0 {
		t.Fatalf("empty family: %v, %v", got, err)
	}
}
