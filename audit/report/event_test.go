package report

import (
	"bytes"
	"regexp"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit"
)

// TestEventReportWording: the report of a treatment given as data names the
// event from the file and never calls it an import in its title, lead,
// readings, glossary, areas or charts; the report of an import still does.
func TestEventReportWording(t *testing.T) {
	r := fixedAudit()
	r.Event = audit.EventSummary{Kind: audit.EventFile, Name: "mapping party series", Source: "parties.csv", Listed: 1, FirstMonth: "2021-02", LastMonth: "2021-02"}
	in := Input{Audit: r, Units: appendixUnits(t)}
	var md bytes.Buffer
	if err := WriteMarkdown(&md, in); err != nil {
		t.Fatal(err)
	}
	v := newView(in)
	if v.Title != "Follow-on editing after mapping party series" || !strings.Contains(v.Lead[0], `"mapping party series"`) || !strings.Contains(v.Lead[0], "parties.csv") {
		t.Errorf("title %q, lead %q", v.Title, v.Lead)
	}
	// Phrases that would call the event an import (a "detected import"
	// that was kept out of the comparison is another matter).
	importWord := regexp.MustCompile(`(?i)\b(the|this|an) import\b|import areas?|pre-import|never-imported|import arrives|after import`)
	var texts []string
	texts = append(texts, v.Title)
	texts = append(texts, v.Lead...)
	texts = append(texts, v.Areas...)
	for _, h := range v.Headline {
		texts = append(texts, h.Reading)
	}
	for _, g := range v.Glossary {
		texts = append(texts, g.Name, g.Text)
	}
	charts, err := MakeCharts(in)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range charts {
		texts = append(texts, c.Caption, string(c.SVG))
	}
	for _, s := range texts {
		if loc := importWord.FindStringIndex(s); loc != nil {
			t.Errorf("event report speaks of an import: %q in %q", s[loc[0]:loc[1]], s[max(0, loc[0]-60):min(len(s), loc[1]+60)])
		}
	}
	r.Event = audit.EventSummary{Kind: audit.EventImport, Name: r.Import.ID}
	if v := newView(Input{Audit: r}); !strings.Contains(v.Title, "import imp-42") {
		t.Errorf("import report title %q", v.Title)
	}
}
