package report

import (
	"bytes"
	"encoding/json"
	"encoding/xml"
	"flag"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geojson"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/report/chart"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/audit/study"
)

var update = flag.Bool("update", false, "rewrite the golden files")

func f64(x float64) *float64 { return &x }

// appendixUnits loads the two units of RFC 7946 appendix A (A.3, a polygon
// with a hole, and A.6, a multipolygon), kept in audit/spatial/testdata.
func appendixUnits(tb testing.TB) *spatial.Units {
	tb.Helper()
	u, err := spatial.Parse("../spatial/testdata/rfc7946_appendix_a.geojson", spatial.Options{})
	if err != nil {
		tb.Fatal(err)
	}
	return u
}

// fixedAudit is a small audit with fixed numbers, for the golden Markdown and
// the structure checks. The figures are made up for formatting only.
func fixedAudit() *audit.Report {
	r := &audit.Report{Schema: audit.Schema, Window: [2]string{"2019-01", "2022-06"}, Before: 24, After: 12}
	r.Import = audit.ImportSummary{ID: "imp-42", Accounts: []string{"harbour_import"}, Changesets: 8, FirstMonth: "2021-01",
		LastMonth: "2021-06", Created: 1200, Modified: 30, Deleted: 2}
	r.Units = study.UnitCounts{Spec: "districts.geojson", Total: 2, Treated: 1, Controls: 1}
	r.Effects = []did.Effect{
		{Layer: "geometry", Estimator: "cs-att", ATT: -0.4, RelativeEffect: f64(-0.12), CI95: [2]float64{-0.31, 0.07}, PValue: 0.21, PreTrendP: f64(0.64), TreatedUnits: 8, ControlUnits: 19, Method: "cluster-robust"},
		{Layer: "attribute", Estimator: "cs-att", ATT: -2.1, RelativeEffect: f64(-0.38), CI95: [2]float64{-0.47, -0.29}, PValue: 0.0004, PreTrendP: f64(0.02), TreatedUnits: 8, ControlUnits: 19, Method: "wild-bootstrap"},
		{Layer: "attribute", Estimator: "ppml-twfe", ATT: -2.0, RelativeEffect: f64(-0.33), CI95: [2]float64{-0.42, -0.22}, PValue: 0.0002, PreTrendP: f64(0.02), TreatedUnits: 8, ControlUnits: 19, Method: "wild-score-bootstrap"},
		{Layer: "geometry", Estimator: "ppml-twfe", ATT: -0.3, RelativeEffect: f64(-0.1), CI95: [2]float64{-0.28, 0.09}, PValue: 0.3, PreTrendP: f64(0.7), TreatedUnits: 8, ControlUnits: 19, Method: "wild-score-bootstrap"},
		{Layer: "attribute", Estimator: "did-2x2", ATT: -1.9, CI95: [2]float64{-2.5, -1.3}, PValue: 0.003, TreatedUnits: 8, ControlUnits: 19, Method: "cluster-robust"},
		{Layer: "newcomers", Estimator: "cs-att", ATT: 0.2, RelativeEffect: f64(0.05), CI95: [2]float64{-0.1, 0.2}, PValue: 0.5, TreatedUnits: 8, ControlUnits: 19, Method: "cluster-robust"},
	}
	for e := -3; e <= 3; e++ {
		for _, l := range []string{"geometry", "attribute", "new_feature", "deletion"} {
			row := did.EventStudyRow{Layer: l, Estimator: "ppml-twfe", Scale: did.ScaleRelative, EventTime: e, Estimate: 0.1 * float64(e), CI95: [2]float64{0.1*float64(e) - 0.5, 0.1*float64(e) + 0.5}, SE: 0.25}
			if e == -1 {
				row.Estimate, row.CI95 = 0, [2]float64{0, 0}
			}
			r.EventStudy = append(r.EventStudy, row)
		}
	}
	r.Robustness = []audit.Agreement{
		{Layer: "geometry", Estimator: "cs-att", Headline: -0.1, Relative: -0.12, Verdict: audit.VerdictAgree, Explanation: "The check tells the same story as the headline."},
		{Layer: "attribute", Estimator: "cs-att", Headline: -0.33, Relative: -0.38, Verdict: audit.VerdictAgree, Explanation: "The check tells the same story as the headline."},
	}
	r.UnitFigures = []audit.UnitFigure{{Unit: "A.3", Layer: "attribute", Observed: 40, Expected: 61.234}}
	r.Placebo = []did.PlaceboRow{{Layer: "attribute", Estimator: "cs-att", ShiftMonths: 6, ATT: 0.1, CI95: [2]float64{-0.3, 0.5}, PValue: 0.6}}
	r.Balance = []audit.BalanceJSON{
		{Covariate: "features_at_start", MeanTreated: 120, MeanControl: 60, MatchedMeanControl: 110, SMDBefore: 0.8, SMDAfter: 0.08},
		{Covariate: "edits_per_month", MeanTreated: 30, MeanControl: 20, MatchedMeanControl: 24, SMDBefore: 0.5, SMDAfter: 0.21, FlagBefore: true, FlagAfter: true},
	}
	r.Warnings = []string{"poor balance after matching on: edits_per_month", "attribute: cs-att: pre-trend test fails (p = 0.02)"}
	r.Notes = []string{"3 events fell outside every unit and were not counted"}
	r.Cautions = []string{"Read these figures with the local community."}
	r.UnitList = []study.UnitInfo{
		{ID: "A.3", Status: study.StatusTreated, FirstMonth: "2021-02", ImportFeatures: 900, FeaturesAtStart: 100, Intensity: 0.9, Weight: 1},
		{ID: "A.6", Status: study.StatusControl, Weight: 1},
	}
	return r
}

// golden compares got with testdata/name, rewriting it with -update and
// saving name_got on a mismatch.
func golden(t *testing.T, name string, got []byte) {
	t.Helper()
	path := filepath.Join("testdata", name)
	if *update {
		if err := os.WriteFile(path, got, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(path)
	if err != nil {
		t.Fatalf("%v (run with -update to create it)", err)
	}
	if !bytes.Equal(got, want) {
		gotPath := path + "_got"
		os.WriteFile(gotPath, got, 0o644)
		t.Errorf("%s differs from the golden file; wrote %s", path, gotPath)
	}
}

func TestMarkdownGolden(t *testing.T) {
	var b bytes.Buffer
	if err := WriteMarkdown(&b, Input{Audit: fixedAudit(), Units: appendixUnits(t)}); err != nil {
		t.Fatal(err)
	}
	golden(t, "fixed.md", b.Bytes())
	md := b.String()
	// Warnings come before the results; cautions close the report.
	if w, h := strings.Index(md, "## Warnings"), strings.Index(md, "## How follow-on editing changed"); w < 0 || h < 0 || w > h {
		t.Errorf("warnings (at %d) should precede the results (at %d)", w, h)
	}
	if !strings.HasSuffix(strings.TrimSpace(md), "Read these figures with the local community.") {
		t.Error("the report should end with the audit's cautions")
	}
	// A failed pre-trend test is spelled out next to the effect it concerns.
	if !strings.Contains(md, "pre-import test failed (p = 0.020)") {
		t.Error("the attribute reading should say its pre-import test failed")
	}
}

func TestReading(t *testing.T) {
	cases := []struct {
		name string
		e    did.Effect
		want []string
	}{
		{"drop", did.Effect{Layer: "attribute", RelativeEffect: f64(-0.3), CI95: [2]float64{-0.45, -0.1}},
			[]string{"about 30% fewer edits that change the tags", "-45.0% to -10.0%", "below zero"}},
		{"rise spans zero", did.Effect{Layer: "geometry", RelativeEffect: f64(0.2), CI95: [2]float64{-0.05, 0.5}},
			[]string{"about 20% more", "includes zero"}},
		{"rise", did.Effect{Layer: "new_feature", RelativeEffect: f64(0.2), CI95: [2]float64{0.05, 0.5}, PreTrendP: f64(0.3)},
			[]string{"above zero"}},
		{"no relative effect", did.Effect{Layer: "deletion", ATT: -0.25, CI95: [2]float64{-0.5, 0.1}},
			[]string{"0.25 fewer deleted features per area and month", "includes zero"}},
		{"failed pre-trend", did.Effect{Layer: "geometry", RelativeEffect: f64(-0.1), CI95: [2]float64{-0.2, -0.01}, PreTrendP: f64(0.01)},
			[]string{"pre-import test failed (p = 0.010)"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := Reading(c.e)
			for _, w := range c.want {
				if !strings.Contains(got, w) {
					t.Errorf("Reading = %q, want it to contain %q", got, w)
				}
			}
			if c.e.PreTrendP != nil && *c.e.PreTrendP >= 0.05 && strings.Contains(got, "failed") {
				t.Errorf("Reading = %q mentions a failure for a passed test", got)
			}
		})
	}
}

// hostile is an audit whose strings from OSM data try to break out of the
// formats: a script tag as account name and unit id, Markdown control
// characters in tag keys and classes, and a line break.
func hostile() Input {
	r := fixedAudit()
	r.Import.ID = "imp-<b>1</b>"
	r.Import.Accounts = []string{`<script>alert("x")</script>`, "a*b_c[d]|e#f`g\nh"}
	r.Warnings = append(r.Warnings, "key <img src=x onerror=alert(1)> is odd")
	r.UnitList[0].ID = "<script>unit</script>"
	cl := &checklist.Checklist{Import: "imp-<i>1</i>", Mode: "history", MinShare: 0.1, MinFeatures: 5, Alpha: 0.05,
		Rows: []checklist.Row{{Class: "shop=<script>", Key: "name|*x*\n# y", Reference: checklist.RefMatchedControls,
			ImportWith: 1, ImportTotal: 10, ImportShare: 0.1, ReferenceWith: 8, ReferenceTotal: 10, ReferenceShare: 0.8,
			Difference: -0.7, CI95: [2]float64{-0.9, -0.4}, QValue: 0.001, Affected: 9, Neglected: true}},
		Cautions: []string{"check locally"}}
	return Input{Audit: r, Checklist: cl}
}

func TestEscaping(t *testing.T) {
	in := hostile()
	var h, m bytes.Buffer
	if err := WriteHTML(&h, in); err != nil {
		t.Fatal(err)
	}
	if err := WriteMarkdown(&m, in); err != nil {
		t.Fatal(err)
	}
	html := h.String()
	for _, bad := range []string{"<script", "<img", "<b>1</b>", "<i>1</i>"} {
		if strings.Contains(strings.ToLower(html), bad) {
			t.Errorf("HTML holds unescaped %q", bad)
		}
	}
	for _, good := range []string{"&lt;script&gt;alert(&#34;x&#34;)&lt;/script&gt;", "shop=&lt;script&gt;", "&lt;img src=x onerror=alert(1)&gt;"} {
		if !strings.Contains(html, good) {
			t.Errorf("HTML lacks the escaped form %q", good)
		}
	}
	md := m.String()
	for _, good := range []string{`\<script\>alert("x")\</script\>`, "a\\*b\\_c\\[d\\]\\|e\\#f\\`g h", `\<img src=x onerror=alert(1)\>`} {
		if !strings.Contains(md, good) {
			t.Errorf("Markdown lacks the escaped form %q", good)
		}
	}
	for _, line := range strings.Split(md, "\n") {
		if strings.HasPrefix(line, "# y") || unescapedAngle.MatchString(line) {
			t.Errorf("Markdown line %q lets data open markup", line)
		}
	}
}

// unescapedAngle matches a tag opening (< and a letter, /, ! or ?) not
// preceded by a backslash.
var unescapedAngle = regexp.MustCompile(`(^|[^\\])<[A-Za-z/!?]`)

// resourceLoad matches anything in HTML or CSS that would fetch from a network.
var resourceLoad = regexp.MustCompile(`(?i)(src|href|srcset|action|poster|data)\s*=\s*["']?\s*(https?:)?//|@import|url\(\s*["']?\s*(https?:)?//|<link\b|<script\b|<iframe\b`)

func TestHTMLSelfContained(t *testing.T) {
	var b bytes.Buffer
	in := Input{Audit: fixedAudit(), Units: appendixUnits(t)}
	if err := WriteHTML(&b, in); err != nil {
		t.Fatal(err)
	}
	page := b.String()
	if m := resourceLoad.FindString(page); m != "" {
		t.Errorf("the page loads a resource: %q", m)
	}
	if strings.Contains(page, "@font-face") {
		t.Error("the page declares a web font")
	}
	// One chart per layer with event-study rows, the balance chart and the map.
	svgs := regexp.MustCompile(`(?s)<svg .*?</svg>`).FindAllString(page, -1)
	if len(svgs) != 6 {
		t.Fatalf("%d inline SVG charts, want 6", len(svgs))
	}
	for i, s := range svgs {
		var v struct {
			XMLName xml.Name
			Title   string `xml:"title"`
		}
		if err := xml.Unmarshal([]byte(s), &v); err != nil {
			t.Errorf("chart %d is not well-formed XML: %v", i, err)
		}
		if v.XMLName.Local != "svg" || v.Title == "" {
			t.Errorf("chart %d: root %q, title %q; want an svg with a title", i, v.XMLName.Local, v.Title)
		}
		if strings.Contains(s, "font-family:Liberation") {
			t.Errorf("chart %d names a font without a local fallback", i)
		}
	}
	for _, want := range []string{"<!DOCTYPE html>", "How follow-on editing changed", "What the numbers mean", "Cautions", `id="warnings"`} {
		if !strings.Contains(page, want) {
			t.Errorf("the page lacks %q", want)
		}
	}
	// Warnings come first: before the headline section.
	if strings.Index(page, `id="warnings"`) > strings.Index(page, `id="headline"`) {
		t.Error("warnings should come before the headline")
	}
}

func TestWriteFiles(t *testing.T) {
	dir := t.TempDir()
	in := Input{Audit: fixedAudit(), Units: appendixUnits(t)}
	if err := Write(dir, in); err != nil {
		t.Fatal(err)
	}
	want := []string{FileMarkdown, FileHTML, FileWiki, FileJSON, FileUnits}
	if got := Files(in); strings.Join(got, ",") != strings.Join(want, ",") {
		t.Errorf("Files = %v, want %v (no panel without a study)", got, want)
	}
	for _, name := range want {
		if fi, err := os.Stat(filepath.Join(dir, name)); err != nil || fi.Size() == 0 {
			t.Errorf("%s: %v", name, err)
		}
	}
	charts, err := filepath.Glob(filepath.Join(dir, DirCharts, "*.svg"))
	if err != nil || len(charts) != 6 {
		t.Errorf("charts folder: %d SVG files, err %v; want 6", len(charts), err)
	}
	for _, c := range charts {
		b, err := os.ReadFile(c)
		if err != nil {
			t.Fatal(err)
		}
		var v struct{ XMLName xml.Name }
		if err := xml.Unmarshal(b, &v); err != nil || v.XMLName.Space != "http://www.w3.org/2000/svg" {
			t.Errorf("%s is not a standalone SVG document: %v (root %v)", c, err, v.XMLName)
		}
	}
	// report.json is the audit contract.
	data, err := os.ReadFile(filepath.Join(dir, FileJSON))
	if err != nil {
		t.Fatal(err)
	}
	var back struct {
		Schema string `json:"schema"`
		Import struct {
			ID string `json:"id"`
		} `json:"import"`
	}
	if err := json.Unmarshal(data, &back); err != nil || back.Schema != audit.Schema || back.Import.ID != "imp-42" {
		t.Errorf("report.json: schema %q id %q err %v", back.Schema, back.Import.ID, err)
	}
	if err := Write(dir, Input{}); err == nil {
		t.Error("Write without an audit, checklist or assessment should fail")
	}
}

// TestWithoutAudit writes a checklist alone: no audit sections, no charts,
// the checklist's rows and cautions, still escaped.
func TestWithoutAudit(t *testing.T) {
	in := hostile()
	in.Audit = nil
	dir := t.TempDir()
	if err := Write(dir, in); err != nil {
		t.Fatal(err)
	}
	if got := strings.Join(Files(in), ","); got != "report.md,report.html,report.wiki,checklist.json" {
		t.Errorf("Files = %s", got)
	}
	page, _ := os.ReadFile(filepath.Join(dir, FileHTML))
	md, _ := os.ReadFile(filepath.Join(dir, FileMarkdown))
	for _, s := range []string{string(page), string(md)} {
		if strings.Contains(s, "How follow-on editing changed") || strings.Contains(s, "<svg") {
			t.Error("a checklist-only report should have no audit sections or charts")
		}
		if !strings.Contains(s, "check locally") || !strings.Contains(s, "import guidelines") {
			t.Error("a checklist-only report should carry the checklist's cautions and the closing caution")
		}
	}
	if strings.Contains(string(page), "<script") || !strings.Contains(string(page), "Neglected tags of import imp-&lt;i&gt;1&lt;/i&gt;") {
		t.Error("checklist-only HTML is not escaped")
	}
}

// TestUnitsGeoJSONRFC7946 writes the units of RFC 7946 appendix A and reads
// them back with orb/geojson and with audit's own unit reader: geometries
// (holes included) survive, and each feature carries the documented
// properties.
func TestUnitsGeoJSONRFC7946(t *testing.T) {
	units := appendixUnits(t)
	var b bytes.Buffer
	if err := WriteUnitsGeoJSON(&b, units, fixedAudit()); err != nil {
		t.Fatal(err)
	}
	fc, err := geojson.UnmarshalFeatureCollection(b.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	if len(fc.Features) != 2 {
		t.Fatalf("%d features, want 2", len(fc.Features))
	}
	// RFC 7946 appendix A.3: the polygon with a hole, as in the RFC.
	wantA3 := orb.Polygon{
		{{100, 0}, {101, 0}, {101, 1}, {100, 1}, {100, 0}},
		{{100.8, 0.8}, {100.8, 0.2}, {100.2, 0.2}, {100.2, 0.8}, {100.8, 0.8}},
	}
	got := fc.Features[0].Geometry
	if mp, ok := got.(orb.MultiPolygon); ok && len(mp) == 1 {
		got = mp[0]
	}
	if !orb.Equal(got, wantA3) {
		t.Errorf("A.3 geometry = %v, want %v (RFC 7946 appendix A.3)", got, wantA3)
	}
	props := fc.Features[0].Properties
	if props["id"] != "A.3" || props["status"] != "treated" || props["first_month"] != "2021-02" || props["weight"] != 1.0 || props["intensity"] != 0.9 {
		t.Errorf("A.3 properties = %v", props)
	}
	// Per-area figures are descriptive and labelled so; no pooled effect is
	// copied onto the areas.
	if props["observed_attribute"] != 40.0 || props["expected_attribute"] != 61.23 || props["observed_geometry"] != nil || props["figures"] != unitFiguresLabel {
		t.Errorf("A.3 figures: observed %v, expected %v, geometry %v, label %v", props["observed_attribute"],
			props["expected_attribute"], props["observed_geometry"], props["figures"])
	}
	for k := range props {
		if strings.Contains(k, "relative") {
			t.Errorf("A.3 carries %s: the pooled effect copied onto one area", k)
		}
	}
	if p := fc.Features[1].Properties; p["status"] != "control" || p["first_month"] != nil || p["figures"] != nil {
		t.Errorf("A.6 properties = %v", p)
	}
	back, err := spatial.FromGeoJSON("units.geojson", b.Bytes(), spatial.Options{})
	if err != nil || back.Len() != 2 || back.ID(1) != "A.6" {
		t.Fatalf("reading units.geojson back as units: %v", err)
	}
}

func TestSplitWarnings(t *testing.T) {
	effects := []did.Effect{{Layer: "attribute"}, {Layer: "newcomers"}, {Layer: "attribute:names"}}
	ws := []string{"poor balance after matching", "attribute: cs-att: pre-trend test fails", "newcomers: cs-att: x", "attribute:names: ppml-twfe: y", "attribute:roads: no estimate"}
	main, other := splitWarnings(ws, effects)
	if len(main) != 2 || len(other) != 3 || main[1] != ws[1] {
		t.Errorf("main %q, other %q", main, other)
	}
}

func TestChartContent(t *testing.T) {
	r := fixedAudit()
	es, ok, err := chart.EventStudy(r.EventStudy, "attribute", chart.SVG)
	if err != nil || !ok {
		t.Fatal(ok, err)
	}
	m, ok, err := chart.Map(appendixUnits(t), r.UnitList, chart.SVG)
	if err != nil || !ok {
		t.Fatal(ok, err)
	}
	bal, ok, err := chart.Balance(r.Balance, chart.SVG)
	if err != nil || !ok {
		t.Fatal(ok, err)
	}
	cases := []struct {
		name string
		svg  []byte
		want []string
	}{
		{"event study", es, []string{"Attribute edits around the import (ppml-twfe)", "95% interval", "import arrives", "reference month (fixed at 0)",
			"months since the import reached the area", "#0072B2", "#D55E00"}},
		// The fixture spans 100–103°E at 0–3°N: 3° of longitude × cos(1.5°)
		// is 333.8 km, a quarter of it 83 km, so the bar is 50 km.
		{"map", m, []string{"Areas in the study", "import area (treated)", "matched comparison area", "50 km", "#D55E00", "#0072B2"}},
		// features_at_start ends within ±0.1 (blue arrow), edits_per_month outside it (vermilion).
		{"balance", bal, []string{"How matching moved each trait", "before matching → after, now alike", "before matching → after, still apart", "alike: within ±0.1",
			"features_at_start", "edits_per_month", "#0072B2", "#D55E00", "#9CC9B4"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			for _, w := range c.want {
				if !bytes.Contains(c.svg, []byte(w)) {
					t.Errorf("SVG lacks %q", w)
				}
			}
		})
	}
	// No reference month without a fixed zero row.
	var rows []did.EventStudyRow
	for _, x := range r.EventStudy {
		if x.EventTime != -1 {
			rows = append(rows, x)
		}
	}
	es, _, _ = chart.EventStudy(rows, "attribute", chart.SVG)
	if bytes.Contains(es, []byte("reference month")) {
		t.Error("a chart without a fixed reference row marks one")
	}
}
