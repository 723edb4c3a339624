// Package reftest reads the reference tables that tests compare against:
// CSV files with a header row, written once by the committed scripts (R
// scripts under each package's testdata/R) and read by the tests. It is for
// tests only.
package reftest

import (
	"encoding/csv"
	"os"
	"strconv"
	"strings"
	"testing"
)

// Table is a CSV reference file; Rows holds its data rows keyed by header name.
type Table struct {
	name string
	Rows []map[string]string
}

// Load reads path, a CSV file with a header row and at least one data row.
func Load(tb testing.TB, path string) Table {
	tb.Helper()
	h, recs := ReadCSV(tb, path)
	if len(recs) == 0 {
		tb.Fatalf("%s: no data rows", path)
	}
	t := Table{name: path}
	for _, r := range recs {
		row := make(map[string]string, len(r))
		for j, k := range h {
			row[k] = r[j]
		}
		t.Rows = append(t.Rows, row)
	}
	return t
}

// Len returns the number of data rows.
func (t Table) Len() int { return len(t.Rows) }

// Str returns column col of row i as written.
func (t Table) Str(tb testing.TB, i int, col string) string {
	tb.Helper()
	s, ok := t.Rows[i][col]
	if !ok {
		tb.Fatalf("%s: no column %q", t.name, col)
	}
	return s
}

// Num parses column col of row i as a float.
func (t Table) Num(tb testing.TB, i int, col string) float64 {
	tb.Helper()
	v, err := strconv.ParseFloat(t.Str(tb, i, col), 64)
	if err != nil {
		tb.Fatalf("%s row %d column %s: %v", t.name, i+2, col, err)
	}
	return v
}

// Int parses column col of row i as an integer.
func (t Table) Int(tb testing.TB, i int, col string) int {
	tb.Helper()
	return int(t.Num(tb, i, col))
}

// ReadCSV loads a committed fixture with a header row, fields trimmed of
// surrounding spaces.
func ReadCSV(tb testing.TB, path string) (header []string, rows [][]string) {
	tb.Helper()
	f, err := os.Open(path)
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	all, err := csv.NewReader(f).ReadAll()
	if err != nil {
		tb.Fatalf("%s: %v", path, err)
	}
	if len(all) == 0 {
		tb.Fatalf("%s: empty", path)
	}
	for _, r := range all {
		for i := range r {
			r[i] = strings.TrimSpace(r[i]) // R pads some columns
		}
	}
	return all[0], all[1:]
}

// Atof parses s as a float or fails the test.
func Atof(tb testing.TB, s string) float64 {
	tb.Helper()
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		tb.Fatal(err)
	}
	return v
}

// Terms reads an R reference table keyed by its first column: term → column
// → value.
func Terms(tb testing.TB, path string) map[string]map[string]float64 {
	tb.Helper()
	h, rows := ReadCSV(tb, path)
	out := map[string]map[string]float64{}
	for _, r := range rows {
		m := map[string]float64{}
		for j := 1; j < len(h); j++ {
			m[h[j]] = Atof(tb, r[j])
		}
		out[r[0]] = m
	}
	return out
}
