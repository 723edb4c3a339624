package report

import (
	"bytes"
	"encoding/json"
	"regexp"
	"slices"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/paulmach/orb"
	"github.com/yuin/goldmark"
	"github.com/yuin/goldmark/extension"
)

// hostileProvenance has strings from OSM data that try to open markup or
// smuggle links: account names, source tags and addresses from changeset
// tags.
func hostileProvenance() *audit.Provenance {
	p := audit.NewProvenance(audit.Generator{Version: "devel-abc", CommandLine: "loadwake audit --units tiles:14", Invented: true})
	p.Import = "imp-1"
	p.Accounts = []string{"import_~~struck~~ &amp; www.evil.example", "<b>bold</b>"}
	p.Changesets = []audit.ChangesetLink{{ID: 42, URL: audit.ChangesetURL(42)}}
	p.SourceTags = []string{"[click](javascript:alert(1))"}
	p.Documentation = []string{"https://wiki.example.org/Import/Harbour", "javascript:alert(1)", "https://x.example/a)b[c]"}
	return p
}

// TestProvenanceMarkdown renders the block with a GFM renderer
// (github.com/yuin/goldmark with its GFM extensions) and checks that the only
// links are the OSM website's changeset page and the plain web address from
// the changeset tags: nothing else from data becomes a link.
func TestProvenanceMarkdown(t *testing.T) {
	var b bytes.Buffer
	writeProvenanceMarkdown(&b, hostileProvenance())
	var out bytes.Buffer
	if err := goldmark.New(goldmark.WithExtensions(extension.GFM)).Convert(b.Bytes(), &out); err != nil {
		t.Fatal(err)
	}
	html := out.String()
	hrefs := regexp.MustCompile(`href="([^"]*)"`).FindAllStringSubmatch(html, -1)
	var got []string
	for _, h := range hrefs {
		got = append(got, h[1])
	}
	want := []string{"https://www.openstreetmap.org/changeset/42", "https://wiki.example.org/Import/Harbour"}
	if !slices.Equal(got, want) {
		t.Errorf("links %q, want %q:\n%s", got, want, html)
	}
	for _, text := range []string{"Where these figures come from", "import_~~struck~~ &amp;amp; www.evil.example",
		"[click](javascript:alert(1))", "javascript:alert(1)", "Open Database Licence"} {
		if !strings.Contains(html, text) {
			t.Errorf("rendered block lacks %q:\n%s", text, html)
		}
	}
	if strings.Contains(html, "<del>") || strings.Contains(html, "<b>") {
		t.Errorf("markup from data:\n%s", html)
	}
}

func TestProvenanceHTML(t *testing.T) {
	in := Input{Audit: fixedAudit()}
	in.Audit.Provenance = hostileProvenance()
	var b bytes.Buffer
	if err := writeHTML(&b, in, nil); err != nil {
		t.Fatal(err)
	}
	h := b.String()
	for _, want := range []string{`id="provenance"`, `<a href="https://www.openstreetmap.org/changeset/42">42</a>`,
		`class="invented"`, "&lt;b&gt;bold&lt;/b&gt;"} {
		if !strings.Contains(h, want) {
			t.Errorf("HTML lacks %q", want)
		}
	}
	if strings.Contains(h, `href="javascript`) || strings.Contains(h, "<b>bold</b>") {
		t.Error("HTML carries a script link or markup from data")
	}
	// The invented-data banner comes before the first section.
	if i, j := strings.Index(h, `class="invented"`), strings.Index(h, "<section"); i < 0 || i > j {
		t.Errorf("banner at %d, first section at %d", i, j)
	}
}

// namedShapes are two square units with names, as admin:LEVEL units have.
type namedShapes struct{}

func (namedShapes) Len() int          { return 2 }
func (namedShapes) ID(i int) string   { return []string{"r1", "r2"}[i] }
func (namedShapes) Name(i int) string { return []string{"Harbour Ward", ""}[i] }
func (namedShapes) Geometry(i int) orb.Geometry {
	x := float64(i)
	return orb.Polygon{{{x, 0}, {x + 1, 0}, {x + 1, 1}, {x, 1}, {x, 0}}}
}

// TestUnitsGeoJSONNames: a unit's name goes into units.geojson beside its id;
// a unit without one gets no name property.
func TestUnitsGeoJSONNames(t *testing.T) {
	var b bytes.Buffer
	if err := WriteUnitsGeoJSON(&b, namedShapes{}, fixedAudit()); err != nil {
		t.Fatal(err)
	}
	var fc struct {
		Features []struct {
			Properties map[string]any `json:"properties"`
		} `json:"features"`
	}
	if err := json.Unmarshal(b.Bytes(), &fc); err != nil {
		t.Fatal(err)
	}
	if len(fc.Features) != 2 || fc.Features[0].Properties["name"] != "Harbour Ward" {
		t.Fatalf("features %+v", fc.Features)
	}
	if _, ok := fc.Features[1].Properties["name"]; ok {
		t.Errorf("unnamed unit has a name: %+v", fc.Features[1].Properties)
	}
}
