package rules

import (
	"fmt"
	"slices"
	"testing"
	"time"

	"github.com/paulmach/osm"
)

// TestDefaultImportMatch checks the default matchers against the signs the
// community's import guidelines ask imports to carry (OSM wiki, Import
// Guidelines: a dedicated import account, import=yes and a source tag on the
// changesets; from memory). Accounts and values are invented.
func TestDefaultImportMatch(t *testing.T) {
	ir := Default().Imports()
	tests := []struct {
		name           string
		cs             osm.Changeset
		creates, total int
		want           string
		wantOK         bool
	}{
		{"import=yes", osm.Changeset{ID: 1, User: "casual", Tags: osm.Tags{{Key: "import", Value: "yes"}}}, 1, 10, "import-tag", true},
		{"import=Yes", osm.Changeset{ID: 1, User: "casual", Tags: osm.Tags{{Key: "import", Value: "Yes"}}}, 0, 10, "import-tag", true},
		{"import=no", osm.Changeset{ID: 1, User: "casual", Tags: osm.Tags{{Key: "import", Value: "no"}}}, 0, 10, "", false},
		{"dedicated account", osm.Changeset{ID: 2, User: "larkfield_import"}, 80, 100, "import-account", true},
		{"dedicated account, edits only", osm.Changeset{ID: 2, User: "larkfield_import"}, 10, 100, "", false},
		{"name merely contains import", osm.Changeset{ID: 3, User: "importantmapper"}, 100, 100, "", false},
		{"bulk creation with source", osm.Changeset{ID: 4, User: "mapper", Tags: osm.Tags{{Key: "source", Value: "county parcels"}}}, 2900, 3000, "bulk-creation", true},
		{"bulk creation without source", osm.Changeset{ID: 4, User: "mapper"}, 2900, 3000, "", false},
		{"small changeset with source", osm.Changeset{ID: 5, User: "mapper", Tags: osm.Tags{{Key: "source", Value: "survey"}}}, 20, 20, "", false},
		{"no versions in history", osm.Changeset{ID: 6, User: "larkfield_import"}, 0, 0, "", false},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, ok := ir.Match(&tt.cs, tt.creates, tt.total)
			if got != tt.want || ok != tt.wantOK {
				t.Errorf("Match = %q, %v, want %q, %v", got, ok, tt.want, tt.wantOK)
			}
		})
	}
}

const matcherRules = `
format: 1
feature_classes:
  keys: [{key: highway, detail: value}]
key_families: [{name: names, keys: [name]}]
import_detection:
  group_gap_days: 1.5
  matchers:
    - name: listed
      changeset_ids: [10, 11]
    - name: agency
      account_names: ['^Agency ', '_bulk$']
      account_ids: [77, 78]
    - name: tagged
      changeset_tags:
        - {key: source, matches: '(?i)parcel'}
        - {key: type, equals: import}
      min_changes: 5
`

func TestMatchConditions(t *testing.T) {
	r, err := Parse("m.yaml", []byte(matcherRules))
	if err != nil {
		t.Fatal(err)
	}
	ir := r.Imports()
	if got, want := ir.GroupGap(), 36*time.Hour; got != want {
		t.Errorf("GroupGap = %v, want %v", got, want)
	}
	if got := ir.MatcherNames(); !slices.Equal(got, []string{"listed", "agency", "tagged"}) {
		t.Errorf("MatcherNames = %v", got)
	}
	tagged := osm.Tags{{Key: "source", Value: "Parcels 2019"}, {Key: "type", Value: "import"}}
	tests := []struct {
		name  string
		cs    osm.Changeset
		total int
		want  []string
	}{
		{"listed id", osm.Changeset{ID: 10}, 1, []string{"listed"}},
		{"unlisted id", osm.Changeset{ID: 12}, 1, nil},
		{"account name and id", osm.Changeset{ID: 1, User: "Agency North", UserID: 77}, 1, []string{"agency"}},
		{"second name pattern", osm.Changeset{ID: 1, User: "north_bulk", UserID: 78}, 1, []string{"agency"}},
		{"name without id", osm.Changeset{ID: 1, User: "Agency North", UserID: 5}, 1, nil},
		{"id without name", osm.Changeset{ID: 1, User: "someone", UserID: 77}, 1, nil},
		{"all tags", osm.Changeset{ID: 1, Tags: tagged}, 5, []string{"tagged"}},
		{"too few changes", osm.Changeset{ID: 1, Tags: tagged}, 4, nil},
		{"num_changes used when no versions", osm.Changeset{ID: 1, Tags: tagged, ChangesCount: 9}, 0, []string{"tagged"}},
		{"one tag wrong", osm.Changeset{ID: 1, Tags: osm.Tags{tagged[0], {Key: "type", Value: "imports"}}}, 5, nil},
		{"one tag missing", osm.Changeset{ID: 1, Tags: tagged[:1]}, 5, nil},
		{"two matchers", osm.Changeset{ID: 11, User: "Agency X", UserID: 78, Tags: tagged}, 5, []string{"listed", "agency", "tagged"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got := ir.MatchAll(&tt.cs, 0, tt.total)
			if !slices.Equal(got, tt.want) {
				t.Errorf("MatchAll = %v, want %v", got, tt.want)
			}
			first, ok := ir.Match(&tt.cs, 0, tt.total)
			if ok != (len(tt.want) > 0) || ok && first != tt.want[0] {
				t.Errorf("Match = %q, %v, want the first of %v", first, ok, tt.want)
			}
		})
	}
}

func BenchmarkClass(b *testing.B) {
	r := Default()
	sets := []osm.Tags{
		{{Key: "highway", Value: "residential"}, {Key: "name", Value: "Elm Street"}, {Key: "tiger:cfcc", Value: "A41"}},
		{{Key: "building", Value: "yes"}, {Key: "addr:housenumber", Value: "12"}, {Key: "addr:street", Value: "Elm Street"}},
		nil,
		{{Key: "amenity", Value: "cafe"}, {Key: "name", Value: "Corner"}, {Key: "opening_hours", Value: "24/7"}},
	}
	n := 0
	for b.Loop() {
		for _, s := range sets {
			_ = r.Class(s)
			n++
		}
	}
	b.ReportAllocs()
	b.ReportMetric(float64(n)/b.Elapsed().Seconds(), "tagsets/s")
}

func BenchmarkFamily(b *testing.B) {
	r := Default()
	keys := []string{"name", "name:en", "tiger:cfcc", "addr:street", "surface", "wikidata", "roof:shape", "name:source"}
	n := 0
	for b.Loop() {
		for _, k := range keys {
			_, _ = r.Family(k)
			n++
		}
	}
	b.ReportAllocs()
	b.ReportMetric(float64(n)/b.Elapsed().Seconds(), "keys/s")
}

func ExampleRuleSet_Class() {
	r := Default()
	fmt.Println(r.Class(osm.Tags{{Key: "building", Value: "yes"}, {Key: "addr:housenumber", Value: "4"}}))
	fmt.Println(r.Family("tiger:cfcc"))
	fmt.Println(r.Family("addr:street"))
	// Output:
	// building=*
	// provenance true
	// addresses false
}
