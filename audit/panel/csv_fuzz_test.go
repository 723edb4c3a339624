package panel_test

import (
	"bytes"
	"errors"
	"fmt"
	"runtime"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/panel"
)

// fuzzColumns names the columns of the seeds: the layout WriteCSV writes.
func fuzzColumns() panel.Columns {
	return panel.Columns{Unit: "unit", Time: "month", FirstTreated: "first_treated",
		Cluster: "cluster", Weight: "weight", Outcomes: []string{"geometry"}}
}

// checkCSVError fails unless err is nil or a positioned *panel.CSVError
// naming the file and unwrapping to panel.ErrInvalid.
func checkCSVError(t testing.TB, err error) {
	t.Helper()
	if err == nil {
		return
	}
	var ce *panel.CSVError
	if !errors.As(err, &ce) || !errors.Is(err, panel.ErrInvalid) {
		t.Fatalf("error %q is not a *CSVError under ErrInvalid", err)
	}
	if ce.File != "fuzz.csv" || ce.Line < 0 || !strings.HasPrefix(err.Error(), "fuzz.csv") {
		t.Fatalf("error %q does not name the file and a position", err)
	}
}

// TestReadCSVMalformed holds the inputs that once panicked or were badly
// positioned, with the line the error must name.
func TestReadCSVMalformed(t *testing.T) {
	header := "unit,month,first_treated,weight,cluster,geometry\n"
	for _, tc := range []struct {
		name string
		data string
		line int
	}{
		// encoding/csv reports a bare quote left open at the line the
		// field starts (Go documentation of csv.ParseError: StartLine/Line).
		{"unclosed quote", header + "a,2031-01,,1,a,1\n\"b,2031-01,,1,b,2\n", 3},
		{"unclosed quote on header", "\"unit,month\n", 1},
		{"short row", header + "a,2031-01,,1\n", 2},
		{"quote inside bare field", header + "a,20\"31-01,,1,a,1\n", 2},
		{"bad month", header + "a,2031-13,,1,a,1\n", 2},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := panel.ReadCSV(strings.NewReader(tc.data), "fuzz.csv", fuzzColumns())
			if err == nil {
				t.Fatal("no error")
			}
			checkCSVError(t, err)
			var ce *panel.CSVError
			errors.As(err, &ce)
			if ce.Line != tc.line {
				t.Errorf("line %d, want %d (%v)", ce.Line, tc.line, err)
			}
		})
	}
}

// FuzzReadCSV feeds arbitrary bytes to ReadCSV: a panel or a positioned
// error, never a panic. Seeds are a valid panel and the malformed lines of
// TestReadCSVMalformed; crashers found by fuzzing live in testdata/fuzz.
func FuzzReadCSV(f *testing.F) {
	header := "unit,month,first_treated,weight,cluster,geometry\n"
	f.Add([]byte(header + "a,2031-01,2031-02,1,a,3\na,2031-02,2031-02,1,a,0\nb,2031-01,,1,b,1\nb,2031-02,,1,b,2\n"))
	f.Add([]byte(header + "a,2031-01,,1,a,1\n\"b,2031-01,,1,b,2\n"))
	f.Add([]byte("\ufeffunit,month,first_treated,weight,cluster,geometry\r\na,2031-01-15,never,0.5,\"x,y\",1e3\r\n"))
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := panel.ReadCSV(bytes.NewReader(data), "fuzz.csv", fuzzColumns())
		checkCSVError(t, err)
		if err == nil {
			if verr := p.Validate(); verr != nil {
				t.Fatalf("ReadCSV returned an invalid panel: %v", verr)
			}
		}
	})
}

// TestReadCSVSparseMonthsFailFast: two rows per unit 9,998 years apart
// are refused as incomplete before a units × months grid is allocated
// (400 units × 119,977 months would be 384 MB of float64s).
func TestReadCSVSparseMonthsFailFast(t *testing.T) {
	var b strings.Builder
	b.WriteString("unit,month,first_treated,weight,cluster,geometry\n")
	for u := range 400 {
		fmt.Fprintf(&b, "u%d,0001-01,,1,u%d,1\nu%d,9999-12,,1,u%d,1\n", u, u, u, u)
	}
	var before, after runtime.MemStats
	runtime.ReadMemStats(&before)
	_, err := panel.ReadCSV(strings.NewReader(b.String()), "fuzz.csv", fuzzColumns())
	runtime.ReadMemStats(&after)
	if err == nil || !strings.Contains(err.Error(), "has no row for month 0001-02") {
		t.Fatalf("got %v", err)
	}
	if after.TotalAlloc-before.TotalAlloc > 200<<20 {
		t.Errorf("allocated %d MB for a %d-byte file", (after.TotalAlloc-before.TotalAlloc)>>20, b.Len())
	}
}
