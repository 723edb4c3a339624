package report

import (
	"bytes"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/did"
)

// TestSplitsInReport: a report with splits carries a forest chart per trait
// and the splits in plain words (the number of splits and Holm's adjustment
// named) in Markdown, HTML and the wiki page. The figures are made up for
// formatting only.
func TestSplitsInReport(t *testing.T) {
	r := fixedAudit()
	p, q := 0.004, 0.008
	r.Splits = &did.Splits{Declared: 2, Tested: 1, Rows: []did.Split{
		{Trait: "landuse", Layer: "attribute", Estimator: did.Headline, DiffP: &p, DiffPHolm: &q, DiffMethod: "interaction-score-bootstrap",
			Groups: []did.GroupEffect{{Group: "rural", TreatedUnits: 6, RelativeEffect: -0.4, CI95: [2]float64{-0.55, -0.2}, PValue: 0.002},
				{Group: "urban", TreatedUnits: 5, RelativeEffect: 0.05, CI95: [2]float64{-0.1, 0.2}, PValue: 0.5}}},
		{Trait: "landuse", Layer: "geometry", Estimator: did.Headline, Note: "no test of the difference: a group has 3 treated areas",
			Groups: []did.GroupEffect{{Group: "rural", TreatedUnits: 3, RelativeEffect: -0.1, CI95: [2]float64{-0.1, -0.1}, PValue: 0.4, NoInterval: true}}},
	}}
	charts, err := MakeCharts(Input{Audit: r})
	if err != nil {
		t.Fatal(err)
	}
	var forest []byte
	for _, c := range charts {
		if c.Name == "by-landuse" {
			forest = c.SVG
		}
	}
	if !bytes.Contains(forest, []byte("<svg")) || !bytes.Contains(forest, []byte("attribute: rural (6)")) {
		t.Fatalf("no forest chart for landuse: %d charts", len(charts))
	}
	if png, ok, err := ChartPNG(Input{Audit: r}, "by-landuse"); err != nil || !ok || !bytes.HasPrefix(png, []byte("\x89PNG")) {
		t.Errorf("no PNG of the forest chart: %v %v", ok, err)
	}
	var md, html, wiki bytes.Buffer
	in := Input{Audit: r}
	if err := WriteMarkdown(&md, in); err != nil {
		t.Fatal(err)
	}
	if err := WriteHTML(&html, in); err != nil {
		t.Fatal(err)
	}
	if err := WriteWiki(&wiki, in); err != nil {
		t.Fatal(err)
	}
	for name, b := range map[string]string{"markdown": md.String(), "html": html.String(), "wiki": wiki.String()} {
		for _, want := range []string{"2 splits were declared", "Holm", "rural (6 areas) -40%", "The groups differ (interaction test p = 0.004, 0.008 after Holm"} {
			if !strings.Contains(b, want) {
				t.Errorf("%s lacks %q", name, want)
			}
		}
	}
}
