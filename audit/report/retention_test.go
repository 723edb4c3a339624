package report

import (
	"bytes"
	"context"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/report/chart"
	"github.com/loadwake/loadwake/audit/retention"
)

// retentionAudit is fixedAudit with a retention section computed from an
// invented sample: 4 import areas and 4 comparison areas, 6 newcomers per
// area and period, fewer staying in import areas after the import.
func retentionAudit(tb testing.TB) Input {
	tb.Helper()
	s := &retention.Sample{Cohorts: []string{"2021-01"}, Treated: [][]int{nil}}
	for u := 0; u < 8; u++ {
		tr := u < 4
		if tr {
			s.Treated[0] = append(s.Treated[0], u)
		} else {
			s.Controls = append(s.Controls, u)
		}
		for _, after := range []bool{false, true} {
			stay := 3 + u%2
			if tr && after {
				stay = 1 + u%2
			}
			for i := 0; i < 6; i++ {
				n := retention.Newcomer{Unit: u, Treated: tr, After: after, Stopped: true, Months: float64(1 + i), FirstYearEdits: 4 + i}
				if i < stay {
					n.Retained = [retention.NumHorizons]int8{1, 1, 1, 0}
					n.Months += 13
				}
				s.Newcomers = append(s.Newcomers, n)
			}
		}
	}
	r, err := retention.Estimate(context.Background(), s, retention.Options{Draws: 199})
	if err != nil {
		tb.Fatal(err)
	}
	a := fixedAudit()
	a.Retention = r
	return Input{Audit: a, Units: appendixUnits(tb)}
}

// section returns the text from the retention heading to the next heading
// marked by next.
func section(tb testing.TB, doc, next string) string {
	tb.Helper()
	i := strings.Index(doc, retentionHeading)
	if i < 0 {
		tb.Fatalf("no %q section", retentionHeading)
	}
	rest := doc[i+len(retentionHeading):]
	if j := strings.Index(rest, next); j >= 0 {
		rest = rest[:j]
	}
	return rest
}

// TestRetentionSection: the section appears in every format with its
// reading, table, tests, definition and cautions, names no account, and
// the chart is drawn.
func TestRetentionSection(t *testing.T) {
	in := retentionAudit(t)
	var md, wiki, page bytes.Buffer
	if err := WriteMarkdown(&md, in); err != nil {
		t.Fatal(err)
	}
	if err := WriteWiki(&wiki, in); err != nil {
		t.Fatal(err)
	}
	if err := WriteHTML(&page, in); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name, doc, next string
	}{
		{"markdown", md.String(), "\n## "},
		{"wiki", wiki.String(), "\n== "},
		{"html", page.String(), "</section>"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			sec := section(t, tc.doc, tc.next)
			for _, want := range []string{
				"were still editing 12 months later",
				"Still editing 12 months on",
				"fewer newcomers kept editing in import areas", // import areas: 14 of 24 stay a year before, 6 of 24 after; comparison: 14 of 24 both times
				"Hazard ratio of stopping",
				"Who counts",
				"never a person",
			} {
				if !strings.Contains(sec, want) {
					t.Errorf("section lacks %q:\n%s", want, sec)
				}
			}
			for _, name := range in.Audit.Import.Accounts {
				if strings.Contains(sec, name) {
					t.Errorf("the section names account %q", name)
				}
			}
		})
	}
	charts, err := MakeCharts(in)
	if err != nil {
		t.Fatal(err)
	}
	found := false
	for _, c := range charts {
		if c.Name == chart.RetentionName {
			found = true
			if !bytes.Contains(c.SVG, []byte("<svg")) {
				t.Error("the retention chart is not SVG")
			}
		}
	}
	if !found {
		t.Error("no retention chart")
	}
	if _, ok, err := ChartPNG(in, chart.RetentionName); !ok || err != nil {
		t.Errorf("retention chart as PNG: ok %v, err %v", ok, err)
	}
	// Without a retention section nothing is added.
	var plain bytes.Buffer
	if err := WriteMarkdown(&plain, Input{Audit: fixedAudit()}); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(plain.String(), retentionHeading) {
		t.Error("a report without retention figures shows the section")
	}
}
