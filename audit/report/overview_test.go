package report

import (
	"bytes"
	"encoding/csv"
	"regexp"
	"strings"
	"testing"

	"github.com/yuin/goldmark"
	"github.com/yuin/goldmark/extension"

	"github.com/loadwake/loadwake/audit"
)

// fixedOverview has three imports: one with clear effects, one with a
// hostile account name and area name from OSM data and no interval, and one
// that could not be audited.
func fixedOverview() *audit.Overview {
	ov := &audit.Overview{Schema: audit.OverviewSchema, Estimator: "ppml-twfe", Units: "tiles:12", Before: 24, After: 24,
		Provenance: hostileProvenance(), Cautions: []string{"evidence, not a verdict"}}
	ov.Provenance.Import = ""
	ov.Imports = []audit.OverviewRow{
		{Import: "imp-20", Accounts: []string{"kav"}, FirstMonth: "2020-01", LastMonth: "2020-09", Changesets: 8, Created: 900,
			ImportAreas: []string{"a", "b"}, ImportAreaNames: []string{"Dunmere", "b"}, ComparisonAreas: 6, Window: [2]string{"2019-01", "2022-09"},
			Effects: []audit.OverviewEffect{
				{Layer: "geometry", RelativeEffect: f64(0.03), CI95: [2]float64{-0.06, 0.13}},
				{Layer: "attribute", RelativeEffect: f64(-0.27), CI95: [2]float64{-0.36, -0.17}},
				{Layer: "deletion", RelativeEffect: f64(-0.18), CI95: [2]float64{-0.37, -0.001}},
			},
			TopKeys:  []audit.OverviewKey{{Key: "building:levels", Class: "building=*", ImportShare: 0.12, ReferenceShare: 0.63, Affected: 700}},
			Warnings: []string{"w1", "w2"}},
		{Import: "imp-10", Accounts: []string{"=HYPERLINK(\"http://evil.example\")", "~~gone~~"}, FirstMonth: "2019-03", LastMonth: "2019-04",
			Changesets: 2, Created: 5000, ImportAreas: []string{"c"}, ImportAreaNames: []string{"[x](http://evil.example)"}, ComparisonAreas: 3,
			Effects: []audit.OverviewEffect{{Layer: "attribute", RelativeEffect: f64(0.10), CI95: [2]float64{0.10, 0.10}, NoInterval: true, PValue: 0.4}}},
		{Import: "imp-30", FirstMonth: "2021-05", LastMonth: "2021-06", Changesets: 1, Created: 10, Error: "study: no comparison areas"},
	}
	return ov
}

// TestOverviewSortRanks: each sortable column ranks rows upward and
// downward, rows without a value last both ways.
func TestOverviewSortRanks(t *testing.T) {
	lines := newOverviewLines(fixedOverview())
	rank := func(l overviewLine, name string) string {
		for k, s := range overviewSorts() {
			if s.Name == name {
				m := regexp.MustCompile(`--a` + regexp.QuoteMeta(string(rune('0'+k))) + `:(\d+);--d\d+:(\d+);`).FindStringSubmatch(string(l.Order))
				return m[1] + "/" + m[2]
			}
		}
		t.Fatalf("no sort %q", name)
		return ""
	}
	tests := []struct {
		column string
		want   [3]string // up/down rank of imp-20, imp-10, imp-30
	}{
		{"import", [3]string{"2/2", "1/3", "3/1"}},    // by first month
		{"size", [3]string{"2/2", "3/1", "1/3"}},      // 900, 5000, 10 versions
		{"attribute", [3]string{"1/2", "2/1", "3/3"}}, // -27%, +10%, none
		{"geometry", [3]string{"1/1", "2/2", "3/3"}},  // only imp-20; ties keep table order
		{"areas", [3]string{"2/1", "1/2", "3/3"}},     // 2, 1, not audited
		{"warnings", [3]string{"3/1", "1/2", "2/3"}},  // 2, 0, 0
	}
	for _, tt := range tests {
		t.Run(tt.column, func(t *testing.T) {
			for i, want := range tt.want {
				if got := rank(lines[i], tt.column); got != want {
					t.Errorf("%s: rank %s, want %s", lines[i].Row.Import, got, want)
				}
			}
		})
	}
}

// TestOverviewMarkdown renders overview.md with a GFM renderer
// (github.com/yuin/goldmark with its GFM extensions): one table with a row
// per import, and no link, strike-through or formula-looking markup from
// OSM data.
func TestOverviewMarkdown(t *testing.T) {
	var b bytes.Buffer
	if err := WriteOverviewMarkdown(&b, fixedOverview()); err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(b.String(), "| not audited | 0 |") {
		t.Error("the keys of an import that was not audited are not marked so")
	}
	var out bytes.Buffer
	if err := goldmark.New(goldmark.WithExtensions(extension.GFM)).Convert(b.Bytes(), &out); err != nil {
		t.Fatal(err)
	}
	h := out.String()
	if n := strings.Count(h, "<table>"); n != 1 {
		t.Fatalf("%d tables:\n%s", n, h)
	}
	if n := strings.Count(h, "<tr>"); n != 4 {
		t.Errorf("%d table rows, want a head and 3 imports", n)
	}
	if strings.Contains(h, "<del>") || strings.Contains(h, `href="http://evil`) {
		t.Errorf("markup from data:\n%s", h)
	}
	for _, want := range []string{"-27% (-36% to -17%), fewer", "no reliable interval (randomization p = 0.400)", "not audited: study: no comparison areas",
		"building:levels on building=*: 12% vs 63%", "Dunmere", "compared 2019-01 to 2022-09", "What the columns mean", "Open Database Licence",
		"3 imports found", "1 could not be audited; its row says why"} {
		if !strings.Contains(h, want) {
			t.Errorf("rendered overview lacks %q", want)
		}
	}
}

// TestOverviewCSV: one record per import with the header's width, numbers
// as numbers, and text a spreadsheet would run as a formula defused.
func TestOverviewCSV(t *testing.T) {
	var b bytes.Buffer
	if err := WriteOverviewCSV(&b, fixedOverview()); err != nil {
		t.Fatal(err)
	}
	recs, err := csv.NewReader(&b).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	if len(recs) != 4 {
		t.Fatalf("%d records", len(recs))
	}
	col := map[string]int{}
	for i, h := range recs[0] {
		col[h] = i
	}
	if got := recs[1][col["attribute_relative_effect"]]; got != "-0.27" {
		t.Errorf("attribute effect %q", got)
	}
	if got := recs[2][col["accounts"]]; !strings.HasPrefix(got, "'=") {
		t.Errorf("formula not defused: %q", got)
	}
	if got := recs[3][col["error"]]; got != "study: no comparison areas" {
		t.Errorf("error %q", got)
	}
}

// TestOverviewHTML: the page sorts without scripts, loads nothing and
// escapes text from data.
func TestOverviewHTML(t *testing.T) {
	var b bytes.Buffer
	if err := WriteOverviewHTML(&b, fixedOverview()); err != nil {
		t.Fatal(err)
	}
	h := b.String()
	if strings.Contains(strings.ToLower(h), "<script") || regexp.MustCompile(`(src|href)="https?:`).MatchString(strings.ReplaceAll(h, `href="https://www.openstreetmap.org/`, "")) {
		t.Error("the page has a script or loads something")
	}
	for _, want := range []string{`id="s0a"`, `id="s8d"`, `style="--a0:2;--d0:2;`, `#s4d:checked ~ .ov tbody tr { --o: var(--d4); }`,
		"[x](http://evil.example)", `class="invented"`, "Where these figures come from"} {
		if !strings.Contains(h, want) {
			t.Errorf("page lacks %q", want)
		}
	}
	if n := strings.Count(h, `type="radio"`); n != 2*len(overviewSorts()) {
		t.Errorf("%d sort buttons, want %d", n, 2*len(overviewSorts()))
	}
}
