package rules

import (
	"bytes"
	"context"
	"errors"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"

	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmxml"
)

func TestDefaultParses(t *testing.T) {
	r, err := Parse(DefaultName, DefaultYAML())
	if err != nil {
		t.Fatalf("built-in rules: %v", err)
	}
	if r.Hash() != Default().Hash() {
		t.Error("Default and Parse(DefaultYAML) differ")
	}
	// The canonical form parses to the same rules.
	again, err := Parse("canonical.yaml", r.Canonical())
	if err != nil {
		t.Fatalf("canonical form does not parse: %v\n%s", err, r.Canonical())
	}
	if again.Hash() != r.Hash() {
		t.Errorf("canonical form hashes to %s, want %s", again.Hash(), r.Hash())
	}
	if got := r.Imports().MatcherNames(); len(got) == 0 {
		t.Error("no import matchers in the defaults")
	}
}

// TestClass checks the default classes of tag sets. The expected classes follow
// the tags' meaning on the Map Features page of the OSM wiki (from memory)
// and how loadwake's defaults collapse them (documented in default.yaml).
func TestClass(t *testing.T) {
	r := Default()
	tests := []struct {
		name string
		tags osm.Tags
		want string
		src  string
	}{
		{"residential street", osm.Tags{{Key: "highway", Value: "residential"}, {Key: "name", Value: "Elm Street"}}, "highway=residential", "Map Features: highway=residential"},
		{"building yes collapses", osm.Tags{{Key: "building", Value: "yes"}}, "building=*", "Map Features: building=yes is the generic building"},
		{"building house collapses", osm.Tags{{Key: "building", Value: "house"}, {Key: "addr:housenumber", Value: "12"}}, "building=*", "Map Features: building=house; addresses on buildings are common practice"},
		{"building no is no building", osm.Tags{{Key: "building", Value: "no"}, {Key: "amenity", Value: "parking"}}, "amenity=parking", "Map Features: building=no; amenity=parking"},
		{"highway outranks building", osm.Tags{{Key: "building", Value: "yes"}, {Key: "highway", Value: "service"}}, "highway=service", "priority order of default.yaml"},
		{"school keeps value", osm.Tags{{Key: "amenity", Value: "school"}, {Key: "building", Value: "school"}}, "building=*", "priority order of default.yaml"},
		{"shop collapses", osm.Tags{{Key: "shop", Value: "bakery"}, {Key: "opening_hours", Value: "Mo-Sa 07:00-18:00"}}, "shop=*", "Map Features: shop=bakery"},
		{"landuse listed", osm.Tags{{Key: "landuse", Value: "residential"}}, "landuse=residential", "Map Features: landuse=residential"},
		{"landuse not listed", osm.Tags{{Key: "landuse", Value: "quarry"}}, "landuse=*", "Map Features: landuse=quarry"},
		{"lake", osm.Tags{{Key: "natural", Value: "water"}, {Key: "water", Value: "lake"}}, "natural=water", "Map Features: natural=water + water=lake"},
		{"stream", osm.Tags{{Key: "waterway", Value: "stream"}}, "waterway=stream", "Map Features: waterway=stream"},
		{"power tower", osm.Tags{{Key: "power", Value: "tower"}}, "power=tower", "Map Features: power=tower"},
		{"address point", osm.Tags{{Key: "addr:housenumber", Value: "5"}, {Key: "addr:street", Value: "Elm Street"}}, "addr:housenumber=*", "common practice: imported address points"},
		{"bus route relation", osm.Tags{{Key: "type", Value: "route"}, {Key: "route", Value: "bus"}}, "route=bus", "Map Features / Relation:route"},
		{"multipolygon without class", osm.Tags{{Key: "type", Value: "multipolygon"}}, "", "Relation:multipolygon carries no class by itself"},
		{"untagged vertex", nil, "", "common practice: way nodes carry no tags"},
		{"only provenance", osm.Tags{{Key: "source", Value: "survey"}, {Key: "created_by", Value: "JOSM"}}, "", "Map Features: source, created_by are not features"},
		{"empty value", osm.Tags{{Key: "highway", Value: ""}}, "", "an empty value names nothing (common practice)"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := r.Class(tt.tags); got != tt.want {
				t.Errorf("Class(%v) = %q, want %q (%s)", tt.tags, got, tt.want, tt.src)
			}
		})
	}
}

// TestRealWay classifies a real OSM way from the history the osm module ships
// (github.com/paulmach/osm v0.8.0, annotate/testdata/way_6394949.osm: a TIGER
// import way in Alameda, California, version 1 of 2007 and its edits).
func TestRealWay(t *testing.T) {
	ways := readWays(t, osmTestdata(t, "annotate/testdata/way_6394949.osm"), 6394949)
	if len(ways) < 2 {
		t.Fatalf("got %d versions of way 6394949, want at least 2", len(ways))
	}
	r := Default()
	for _, w := range ways {
		if got := r.Class(w.Tags); got != "highway=residential" {
			t.Errorf("v%d: Class = %q, want highway=residential (the file's highway tag)", w.Version, got)
		}
	}
	// Version 1 is the TIGER import: every key besides highway and name is
	// import bookkeeping (the tiger:* prefix, Map Features wiki / TIGER wiki page).
	for _, tag := range ways[0].Tags {
		fam, prov := r.Family(tag.Key)
		switch tag.Key {
		case "highway":
			if fam != Other || prov {
				t.Errorf("Family(highway) = %q, %v; a class key is in no family by default", fam, prov)
			}
		case "name":
			if fam != "names" || prov {
				t.Errorf("Family(name) = %q, %v, want names, false", fam, prov)
			}
		default:
			if !strings.HasPrefix(tag.Key, "tiger:") || !prov {
				t.Errorf("v1 key %q: Family = %q, %v, want a tiger:* provenance key", tag.Key, fam, prov)
			}
		}
	}
	// Version 2 added created_by and note: both bookkeeping (Map Features wiki).
	for _, key := range []string{"created_by", "note"} {
		if ways[1].Tags.Find(key) == "" {
			t.Fatalf("v2 lacks %s; the fixture changed", key)
		}
		if _, prov := r.Family(key); !prov {
			t.Errorf("Family(%s) is not provenance", key)
		}
	}
}

// osmTestdata returns the path of a file in the osm module's source in the
// module cache; the test skips when the cache does not hold it.
func osmTestdata(t testing.TB, rel string) string {
	t.Helper()
	out, err := exec.Command("go", "env", "GOMODCACHE").Output()
	if err != nil {
		t.Skipf("go env GOMODCACHE: %v", err)
	}
	p := filepath.Join(strings.TrimSpace(string(out)), "github.com", "paulmach", "osm@v0.8.0", rel)
	if _, err := os.Stat(p); err != nil {
		t.Skipf("osm module testdata not in the module cache: %v", err)
	}
	return p
}

func readWays(t testing.TB, path string, id osm.WayID) []*osm.Way {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := osmxml.New(context.Background(), f)
	defer sc.Close()
	var out []*osm.Way
	for sc.Scan() {
		if w, ok := sc.Object().(*osm.Way); ok && w.ID == id {
			out = append(out, w)
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	return out
}

// TestFamily checks key families of the defaults. Key meanings from the Map
// Features page of the OSM wiki (from memory); the import prefixes (tiger:*)
// are bookkeeping by common practice.
func TestFamily(t *testing.T) {
	r := Default()
	tests := []struct {
		key        string
		family     string
		provenance bool
	}{
		{"tiger:cfcc", "provenance", true},
		{"tiger:name_base", "provenance", true},
		{"name:en", "names", false},
		{"name", "names", false},
		{"addr:street", "addresses", false},
		{"addr:housenumber", "addresses", false},
		{"source", "provenance", true},
		{"source:geometry", "provenance", true},
		{"name:source", "provenance", true}, // "*:source" glob; provenance comes first
		{"FIXME", "provenance", true},
		{"created_by", "provenance", true},
		{"surface", "road", false},
		{"lanes:forward", "road", false},
		{"maxspeed", "road", false},
		{"building:levels", "building", false},
		{"roof:shape", "building", false},
		{"opening_hours", "poi", false},
		{"contact:phone", "poi", false},
		{"highway", Other, false},
		{"wikidata", Other, false},
		{"name_1", Other, false},
		{"a/b:source", Other, false}, // path.Match: * does not cross a slash
		{"", Other, false},
	}
	for _, tt := range tests {
		t.Run(tt.key, func(t *testing.T) {
			fam, prov := r.Family(tt.key)
			if fam != tt.family || prov != tt.provenance {
				t.Errorf("Family(%q) = %q, %v, want %q, %v", tt.key, fam, prov, tt.family, tt.provenance)
			}
		})
	}
}

// TestFamilyOrder checks that the first family in file order wins whatever
// the kind of pattern.
func TestFamilyOrder(t *testing.T) {
	src := strings.Replace(string(DefaultYAML()), "key_families:\n", "key_families:\n  - name: first\n    keys: [\"n?me:en\"]\n", 1)
	r, err := Parse("order.yaml", []byte(src))
	if err != nil {
		t.Fatal(err)
	}
	if fam, _ := r.Family("name:en"); fam != "first" {
		t.Errorf("Family(name:en) = %q, want first", fam)
	}
	if fam, _ := r.Family("name:de"); fam != "names" {
		t.Errorf("Family(name:de) = %q, want name", fam)
	}
}

// TestProblems checks that a broken file reports every problem with its
// position (golden table; positions counted in testdata/broken.yaml).
func TestProblems(t *testing.T) {
	_, err := Load(filepath.Join("testdata", "broken.yaml"))
	if !errors.Is(err, ErrInvalid) {
		t.Fatalf("err = %v, want ErrInvalid", err)
	}
	var ps *Problems
	if !errors.As(err, &ps) {
		t.Fatalf("err is %T, want *Problems", err)
	}
	f := filepath.Join("testdata", "broken.yaml")
	want := []string{
		f + `:7:31: detail "shape" is not one of value, key, listed`,
		f + `:8:13: class key "highway" repeated (first at line 6)`,
		f + `:9:7: detail: listed needs a values list`,
		f + `:14:11: family name "names" repeated (first at line 12)`,
		f + `:15:12: key pattern "[ref": bad glob (Go path.Match syntax): syntax error in pattern`,
		f + `:17:11: family "empty" has no keys`,
		f + `:18:11: family name "other" is reserved for keys no family matches`,
		f + `:19:17: provenance must be true or false, not a string`,
		f + `:22:19: group_gap_days -3 is out of range 0 to 3650`,
		f + `:26:34: bad regular expression "(yes": missing closing ): ` + "`(yes`",
		f + `:27:27: min_creation_share 1.5 is out of range 0 to 1`,
		f + `:28:13: matcher name "tagged" repeated (first at line 24)`,
		f + `:30:7: unknown field "colour" in a matcher (known: name, changeset_tags, account_names, account_ids, changeset_ids, min_changes, min_creation_share)`,
		f + `:31:7: matcher "nothing" has no conditions; it would match every changeset`,
	}
	var got []string
	for _, p := range *ps {
		got = append(got, p.Error())
	}
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("problems:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
}

func TestProblemsMore(t *testing.T) {
	tests := []struct {
		name, src, want string
	}{
		{"syntax", "format: 1\nfeature_classes: [\n", "s.yaml:3:1: YAML syntax: did not find expected node content"},
		{"empty", "", "s.yaml:1:1: rule file is empty"},
		// yaml places the empty document at a fresh line 2; the file ends at 1:4.
		{"document start only", "---", "s.yaml:1:4: the rule file must be a mapping, not empty"},
		{"not a mapping", "- 1\n", "s.yaml:1:1: the rule file must be a mapping, not a list"},
		{"missing sections", "format: 1\n", `s.yaml:1:1: the rule file lacks field "feature_classes"`},
		{"format", "format: 2\n", "s.yaml:1:9: format 2 is not known; this loadwake reads format 1"},
		{"repeated field", "format: 1\nformat: 1\n", `s.yaml:2:1: field "format" repeated in the rule file (first at line 1)`},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Parse("s.yaml", []byte(tt.src))
			var ps *Problems
			if !errors.As(err, &ps) || len(*ps) == 0 {
				t.Fatalf("err = %v, want problems", err)
			}
			for _, p := range *ps {
				if p.Error() == tt.want {
					return
				}
			}
			t.Errorf("problems:\n%v\nwant among them %q", ps, tt.want)
		})
	}
}

func TestLoadMissing(t *testing.T) {
	_, err := Load(filepath.Join(t.TempDir(), "none.yaml"))
	if err == nil || !strings.Contains(err.Error(), "none.yaml") || errors.Is(err, ErrInvalid) {
		t.Errorf("err = %v, want a read error naming the file", err)
	}
}

func TestHash(t *testing.T) {
	base := Default().Hash()
	if len(base) != 64 {
		t.Fatalf("hash %q is not hex SHA-256", base)
	}
	if base != Default().Hash() {
		t.Error("hash not stable across parses")
	}
	tests := []struct {
		name    string
		edit    func(string) string
		changes bool
	}{
		{"comment only", func(s string) string { return "# a remark\n" + s }, false},
		{"spacing only", func(s string) string {
			return strings.ReplaceAll(s, "{key: highway, detail: value}", "{ key: highway,   detail: value }")
		}, false},
		{"gap changed", func(s string) string { return strings.Replace(s, "group_gap_days: 365", "group_gap_days: 366", 1) }, true},
		{"priority changed", func(s string) string {
			s = strings.Replace(s, "    - {key: highway, detail: value}\n", "", 1)
			return strings.Replace(s, "    - {key: route, detail: value}\n", "    - {key: route, detail: value}\n    - {key: highway, detail: value}\n", 1)
		}, true},
		{"key added", func(s string) string {
			return strings.Replace(s, "      - surface\n", "      - surface\n      - surface:note\n", 1)
		}, true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			src := tt.edit(string(DefaultYAML()))
			if src == string(DefaultYAML()) {
				t.Fatal("edit changed nothing; the defaults changed")
			}
			r, err := Parse("edited.yaml", []byte(src))
			if err != nil {
				t.Fatal(err)
			}
			if changed := r.Hash() != base; changed != tt.changes {
				t.Errorf("hash changed = %v, want %v", changed, tt.changes)
			}
		})
	}
}

func TestDefaultYAMLIsCopy(t *testing.T) {
	a := DefaultYAML()
	a[0] = 'X'
	if bytes.Equal(a, DefaultYAML()) {
		t.Error("DefaultYAML returns shared memory")
	}
}

// TestSyntaxPositions checks where YAML syntax errors are reported: at the
// 1-based line and column where the parser gave up, with the construct it was
// reading named by its own start. Every expected position was worked out by
// hand, counting lines and columns in the source string (a tab or a space is
// one column; the end of a file that ends with a newline is column 1 of the
// line after it, of one without a newline the column after its last
// character; ä is one column, not two bytes; a CR alone breaks a line, as the
// YAML spec's line breaks include it); the message texts are go.yaml.in/yaml/v4 v4.0.0's.
func TestSyntaxPositions(t *testing.T) {
	tests := []struct {
		name, src  string
		line, col  int
		msgContain string
	}{
		{"tab indent", "format: 1\n\tfeature_classes: {}\n", 2, 1, "found a tab character that violates indentation"},
		{"reserved character", "format: 1\nfeature_classes: @x\n", 2, 18, "found character that cannot start any token"},
		{"second colon", "format: 1\nkey_families: a: b\n", 2, 16, "mapping values are not allowed in this context"},
		{"key indented one space", "format: 1\nfeature_classes:\n  keys: []\n ignore_values: []\n", 4, 2, "did not find expected key"},
		{"list item among keys", "format: 1\n- x\n", 2, 1, "did not find expected key (while parsing a block mapping that starts at line 1, column 1)"},
		{"unterminated quote", "format: 1\nfeature_classes: \"abc\n", 3, 1, "found unexpected end of stream (while scanning a quoted scalar that starts at line 2, column 18)"},
		{"unclosed flow mapping", "format: 1\nfeature_classes: {keys: []\n", 3, 1, "did not find expected ',' or '}' (while parsing a flow mapping that starts at line 2, column 18)"},
		{"unclosed list without newline", "format: 1\nfeature_classes: [", 2, 19, "did not find expected node content"},
		{"unterminated quote without newline", "format: 1\nfeature_classes: \"ab", 2, 21, "found unexpected end of stream"},
		{"wide characters before the error", "format: 1\nkey_families: \"äö\": b\n", 2, 19, "mapping values are not allowed in this context"},
		{"error on line 1", "format: [\n", 2, 1, "did not find expected node content"},
		{"unknown alias", "format: *nope\n", 1, 9, "unknown anchor 'nope' referenced"},
		{"control character", "format: 1\nkey_families: a\x01b\n", 2, 16, "control characters are not allowed"},
		{"CR line breaks", "format: 1\rkey_families: a: b\r", 2, 16, "mapping values are not allowed in this context"},
		{"CR LF line breaks", "format: 1\r\nkey_families: a: b\r\n", 2, 16, "mapping values are not allowed in this context"},
		{"control character after CR", "format: 1\rkey_families: a\x01b\n", 2, 16, "control characters are not allowed"},
		{"invalid UTF-8", "format: 1\nkey_families: \"é\xff\"\n", 2, 17, "invalid"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := Parse("s.yaml", []byte(tt.src))
			var ps *Problems
			if !errors.As(err, &ps) || len(*ps) != 1 {
				t.Fatalf("err = %v, want one problem", err)
			}
			p := (*ps)[0]
			if p.Line != tt.line || p.Column != tt.col || !strings.Contains(p.Msg, tt.msgContain) {
				t.Errorf("got %s, want s.yaml:%d:%d: ...%s", p.Error(), tt.line, tt.col, tt.msgContain)
			}
		})
	}
}
