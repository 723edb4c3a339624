package checklist

import (
	"errors"
	"fmt"
	"math"
	"strconv"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/reftest"
)

func nearAbs(got, want, tol float64) bool {
	return math.Abs(got-want) <= tol
}

// Source: R 4.2.2 stats::prop.test(x, n, conf.level, correct = FALSE), whose
// one-sample interval is the Wilson score interval; values written by
// testdata/R/props_reference.R into testdata/props_wilson.csv.
func TestWilsonAgainstR(t *testing.T) {
	ref := reftest.Load(t, "testdata/props_wilson.csv")
	for i := range ref.Rows {
		x, n, level := ref.Int(t, i, "x"), ref.Int(t, i, "n"), ref.Num(t, i, "conf")
		t.Run(strconv.Itoa(x)+"/"+strconv.Itoa(n), func(t *testing.T) {
			iv, err := Wilson(x, n, level)
			if err != nil {
				t.Fatal(err)
			}
			lo, hi := ref.Num(t, i, "lower"), ref.Num(t, i, "upper")
			if !nearAbs(iv.Lower, lo, 1e-9) || !nearAbs(iv.Upper, hi, 1e-9) {
				t.Errorf("Wilson(%d, %d, %v) = [%.10f, %.10f], R prop.test gives [%.10f, %.10f]",
					x, n, level, iv.Lower, iv.Upper, lo, hi)
			}
		})
	}
}

// Newcombe (1998), Statistics in Medicine 17:873–890, Table II, method 10
// (hybrid score, no continuity correction). The published limits below are
// quoted from memory to four decimals; every one of them also agrees with
// testdata/props_newcombe.csv, which testdata/R/props_reference.R computes in
// R from prop.test's Wilson limits. (A brief once gave 56/70 − 48/80 as
// "0.1833, 0.0336 to 0.3231"; 56/70 − 48/80 is 0.2000, and method 10 gives the
// interval below.)
func TestNewcombePublished(t *testing.T) {
	cases := []struct {
		name           string
		x1, n1, x2, n2 int
		diff, lo, hi   float64
	}{
		{"a 56/70-48/80", 56, 70, 48, 80, 0.2000, 0.0524, 0.3339},
		{"b 9/10-3/10", 9, 10, 3, 10, 0.6000, 0.1705, 0.8090},
		{"c 6/7-2/7", 6, 7, 2, 7, 0.5714, 0.0582, 0.8062},
		{"d 5/56-0/29", 5, 56, 0, 29, 0.0893, -0.0381, 0.1926},
		{"e 0/10-0/20", 0, 10, 0, 20, 0, -0.1611, 0.2775},
		{"f 0/10-0/10", 0, 10, 0, 10, 0, -0.2775, 0.2775},
		{"g 10/10-0/20", 10, 10, 0, 20, 1, 0.6791, 1},
		{"h 10/10-0/10", 10, 10, 0, 10, 1, 0.6075, 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			iv, err := NewcombeDiff(c.x1, c.n1, c.x2, c.n2, 0.95)
			if err != nil {
				t.Fatal(err)
			}
			if !nearAbs(iv.Estimate, c.diff, 5e-5) || !nearAbs(iv.Lower, c.lo, 5e-5) || !nearAbs(iv.Upper, c.hi, 5e-5) {
				t.Errorf("got %.4f [%.4f, %.4f], Newcombe 1998 Table II: %.4f [%.4f, %.4f]",
					iv.Estimate, iv.Lower, iv.Upper, c.diff, c.lo, c.hi)
			}
		})
	}
}

// Source: testdata/props_newcombe.csv, Newcombe's method 10 formula evaluated in
// R 4.2.2 on prop.test(correct = FALSE) Wilson limits (testdata/R/props_reference.R).
func TestNewcombeAgainstR(t *testing.T) {
	ref := reftest.Load(t, "testdata/props_newcombe.csv")
	for i := range ref.Rows {
		x1, n1, x2, n2 := ref.Int(t, i, "x1"), ref.Int(t, i, "n1"), ref.Int(t, i, "x2"), ref.Int(t, i, "n2")
		iv, err := NewcombeDiff(x1, n1, x2, n2, 0.95)
		if err != nil {
			t.Fatal(err)
		}
		d, lo, hi := ref.Num(t, i, "diff"), ref.Num(t, i, "lower"), ref.Num(t, i, "upper")
		if !nearAbs(iv.Estimate, d, 1e-9) || !nearAbs(iv.Lower, lo, 1e-9) || !nearAbs(iv.Upper, hi, 1e-9) {
			t.Errorf("%d/%d - %d/%d: got %.10f [%.10f, %.10f], R: %.10f [%.10f, %.10f]",
				x1, n1, x2, n2, iv.Estimate, iv.Lower, iv.Upper, d, lo, hi)
		}
	}
}

// Source: R 4.2.2 prop.test(c(x1, x2), c(n1, n2), correct = FALSE): X-squared
// and p-value, in testdata/props_ztest.csv (testdata/R/props_reference.R).
func TestTwoProportionZAgainstR(t *testing.T) {
	ref := reftest.Load(t, "testdata/props_ztest.csv")
	for i := range ref.Rows {
		x1, n1, x2, n2 := ref.Int(t, i, "x1"), ref.Int(t, i, "n1"), ref.Int(t, i, "x2"), ref.Int(t, i, "n2")
		zt, err := TwoProportionZ(x1, n1, x2, n2)
		if err != nil {
			t.Fatal(err)
		}
		chi, p := ref.Num(t, i, "statistic"), ref.Num(t, i, "p")
		if !nearAbs(zt.Chi2, chi, 1e-8*math.Max(1, chi)) || !nearAbs(zt.P, p, 1e-10) {
			t.Errorf("%d/%d vs %d/%d: chi2 %.10g p %.10g, R prop.test: %.10g p %.10g",
				x1, n1, x2, n2, zt.Chi2, zt.P, chi, p)
		}
	}
}

// Source: R 4.2.2 p.adjust(p, method = "BH") in testdata/props_bh.csv
// (testdata/R/props_reference.R); the vector has ties and is unsorted at the tail.
func TestBHAdjustAgainstR(t *testing.T) {
	ref := reftest.Load(t, "testdata/props_bh.csv")
	p := make([]float64, len(ref.Rows))
	for i := range ref.Rows {
		p[i] = ref.Num(t, i, "p")
	}
	q, err := BHAdjust(p)
	if err != nil {
		t.Fatal(err)
	}
	for i := range q {
		if want := ref.Num(t, i, "q"); !nearAbs(q[i], want, 1e-10) {
			t.Errorf("q[%d] = %.12g, R p.adjust BH: %.12g", i, q[i], want)
		}
	}
}

func TestProportionBadInput(t *testing.T) {
	cases := []struct {
		name string
		run  func() error
	}{
		{"no trials", func() error { _, err := Wilson(0, 0, 0.95); return err }},
		{"x above n", func() error { _, err := Wilson(11, 10, 0.95); return err }},
		{"negative x", func() error { _, err := Wilson(-1, 10, 0.95); return err }},
		{"level 1", func() error { _, err := Wilson(1, 10, 1); return err }},
		{"level NaN", func() error { _, err := Wilson(1, 10, math.NaN()); return err }},
		{"newcombe second", func() error { _, err := NewcombeDiff(1, 10, 5, 4, 0.95); return err }},
		{"z first", func() error { _, err := TwoProportionZ(1, 0, 1, 4); return err }},
		{"bh NaN", func() error { _, err := BHAdjust([]float64{0.1, math.NaN()}); return err }},
		{"bh above 1", func() error { _, err := BHAdjust([]float64{1.5}); return err }},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if err := c.run(); !errors.Is(err, ErrProportion) {
				t.Errorf("got %v, want ErrProportion", err)
			}
		})
	}
}

func ExampleNewcombeDiff() {
	// Newcombe (1998), Table II, example (a): 56/70 against 48/80.
	iv, err := NewcombeDiff(56, 70, 48, 80, 0.95)
	if err != nil {
		panic(err)
	}
	fmt.Printf("%.4f [%.4f, %.4f]\n", iv.Estimate, iv.Lower, iv.Upper)
	// Output: 0.2000 [0.0524, 0.3339]
}
