package checklist

import (
	"bytes"
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// clStudy builds the study of the world's import, named by its changesets.
func clStudy(tb testing.TB, w *worldtest.World) *study.Study {
	tb.Helper()
	st, err := study.Build(context.Background(), w.Store, study.RefOf(w.Named(tb)), w.Units, study.Options{})
	if err != nil {
		tb.Fatalf("study.Build: %v", err)
	}
	return st
}

func clChecklistConfig() sim.Config {
	c := sim.DefaultConfig()
	c.Cols, c.Rows, c.Months = 6, 6, 24
	c.Treated, c.Waves = 8, 2
	c.ImportBuildings, c.ImportPOIs = 200, 40
	c.Seed = 7
	// No organic attribute edits: no feature gains a key after it was
	// created, so the shares at the window end are the planted rates and
	// only the planted differences are real. (With attribute edits spread
	// per district, imported features in dense import districts gain keys
	// more slowly than organic ones in sparse control districts, a real
	// difference the checklist would rightly show.)
	c.Shares = sim.Shares{Geometry: 0.5, Attribute: 0, NewFeature: 0.25, Deletion: 0.1, Bookkeeping: 0.15}
	return c
}

// TestChecklistSimulated checks the checklist on a simulated world whose
// truth.json lists the keys planted as neglected (imports carry them less
// often than organic features) and as equal: every neglected key is flagged
// and ranks above every other row; no key planted equal is flagged (the
// Benjamini–Hochberg step keeps false discoveries rare).
func TestChecklistSimulated(t *testing.T) {
	if testing.Short() {
		t.Skip("simulated world: skipped with -short")
	}
	w := worldtest.BuildWith(t, clChecklistConfig(), worldtest.ChecklistRules(t))
	st := clStudy(t, w)
	cl, err := Build(context.Background(), w.Store, w.Rules, st, w.Units, Options{})
	if err != nil {
		t.Fatalf("Build: %v", err)
	}
	planted := map[[2]string]string{}
	for _, k := range w.Truth.Keys {
		planted[[2]string{k.Class, k.Key}] = k.Planted
	}
	var ranks []Row
	for _, r := range cl.Rows {
		if r.Reference == RefMatchedControls {
			ranks = append(ranks, r)
		}
	}
	if len(ranks) == 0 {
		t.Fatalf("no matched-control rows; notes %v", cl.Notes)
	}
	nNeglected := 0
	for _, k := range w.Truth.Keys {
		if k.Planted == "neglected" {
			nNeglected++
		}
	}
	for i, r := range ranks {
		kind := planted[[2]string{r.Class, r.Key}]
		t.Logf("%2d %-12s %-18s import %4d/%4d ref %4d/%4d diff %+.3f q %.3g neglected=%v planted=%q",
			i, r.Class, r.Key, r.ImportWith, r.ImportTotal, r.ReferenceWith, r.ReferenceTotal, r.Difference, r.QValue, r.Neglected, kind)
		switch {
		case i < nNeglected && (kind != "neglected" || !r.Neglected):
			t.Errorf("rank %d is %s %s (planted %q, flagged %v); want the %d planted neglected keys on top, flagged", i, r.Class, r.Key, kind, r.Neglected, nNeglected)
		case i >= nNeglected && kind == "neglected":
			t.Errorf("planted neglected key %s %s ranks %d, below a key not planted", r.Class, r.Key, i)
		case kind == "equal" && r.Neglected:
			t.Errorf("key planted equal %s %s flagged neglected (q %.3g)", r.Class, r.Key, r.QValue)
		}
		if r.GainedLater != 0 || r.OrganicGainRate != 0 {
			t.Errorf("%s %s: gains %v and %v in a world without attribute edits", r.Class, r.Key, r.GainedLater, r.OrganicGainRate)
		}
		if r.CI95[0] > r.Difference || r.CI95[1] < r.Difference || r.ImportCI95[0] > r.ImportShare || r.ImportCI95[1] < r.ImportShare {
			t.Errorf("%s %s: intervals do not hold their estimates: %+v", r.Class, r.Key, r)
		}
	}
	var md bytes.Buffer
	if err := cl.WriteMarkdown(&md); err != nil {
		t.Fatal(err)
	}
	if got := strings.Count(md.String(), "- [ ] "); got != len(cl.Neglected(RefMatchedControls)) {
		t.Errorf("markdown has %d checklist lines, want %d:\n%s", got, len(cl.Neglected(RefMatchedControls)), md.String())
	}
	if !strings.Contains(md.String(), "import guidelines") {
		t.Errorf("markdown lacks the cautions:\n%s", md.String())
	}
	var js bytes.Buffer
	if err := cl.WriteJSON(&js); err != nil {
		t.Fatal(err)
	}
	var back struct {
		Rows []map[string]any `json:"rows"`
	}
	if err := json.Unmarshal(js.Bytes(), &back); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{"class", "key", "import_with", "import_total", "reference_with", "reference_total",
		"difference", "ci95", "q_value", "gained_later", "organic_gain_rate", "neglected", "reference"} {
		if _, ok := back.Rows[0][f]; !ok {
			t.Errorf("JSON rows lack %q", f)
		}
	}
}

// TestSnapshotChecklistDelaware compares snapshot-mode counts on the Delaware
// extract the osm module ships (github.com/paulmach/osm v0.8.0,
// testdata/delaware-latest.osm.pbf, © OpenStreetMap contributors, ODbL) with
// counts made by osmium-tool 1.15.0 (libosmium 2.19.0, Debian):
//
//	osmium tags-filter -R delaware-latest.osm.pbf w/highway -o hw.pbf          # 52585 ways
//	osmium tags-filter -R hw.pbf 'w/tiger:*' -o tiger.pbf                     # 28343 ways
//	osmium tags-filter -R -i hw.pbf 'w/tiger:*' -o other.pbf                  # 24242 ways
//	osmium tags-filter -R tiger.pbf w/highway=residential -o tiger-residential.pbf   (likewise service, and other.pbf)
//	osmium tags-count tiger-residential.pbf name oneway surface lanes access service maxspeed highway
//
// The "highway" count of each file is the class total.
func TestSnapshotChecklistDelaware(t *testing.T) {
	if testing.Short() {
		t.Skip("Delaware extract: skipped with -short")
	}
	ctx := context.Background()
	path := worldtest.OSMFixture(t, "delaware-latest.osm.pbf")
	if _, err := os.Stat(path); err != nil {
		t.Skipf("osm module testdata not in the module cache: %v", err)
	}
	// An empty store on disk takes ingest's bulk path, the cheaper one for a
	// whole extract.
	st, err := ingest.Open(t.TempDir(), ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	if _, err := ingest.Ingest(ctx, st, []string{path}, ingest.IngestOptions{}); err != nil {
		t.Fatalf("ingest: %v", err)
	}
	prov, err := ParseProvenance("tiger:*")
	if err != nil {
		t.Fatal(err)
	}
	// MinShare and MinFeatures low so that every key osmium counted gets a row.
	cl, err := Snapshot(ctx, st, rules.Default(), prov, Options{Types: []osm.Type{osm.TypeWay}, MinShare: 1e-9, MinFeatures: 1})
	if err != nil {
		t.Fatalf("Snapshot: %v", err)
	}
	type counts struct{ with, total int }
	// Figures from osmium tags-count (commands above).
	want := []struct {
		class, key   string
		tiger, other counts
	}{
		{"highway=residential", "name", counts{16893, 18721}, counts{4535, 5598}},
		{"highway=residential", "oneway", counts{1069, 18721}, counts{770, 5598}},
		{"highway=residential", "surface", counts{215, 18721}, counts{246, 5598}},
		{"highway=residential", "lanes", counts{169, 18721}, counts{104, 5598}},
		{"highway=residential", "access", counts{94, 18721}, counts{20, 5598}},
		{"highway=residential", "maxspeed", counts{73, 18721}, counts{18, 5598}},
		{"highway=service", "service", counts{353, 2135}, counts{4568, 10167}},
		{"highway=service", "access", counts{1303, 2135}, counts{1016, 10167}},
		{"highway=service", "name", counts{402, 2135}, counts{347, 10167}},
		{"highway=service", "oneway", counts{64, 2135}, counts{1163, 10167}},
		{"highway=service", "lanes", counts{7, 2135}, counts{158, 10167}},
		{"highway=service", "surface", counts{5, 2135}, counts{141, 10167}},
	}
	rows := map[[2]string]Row{}
	for _, r := range cl.Rows {
		if r.Reference != RefWithoutProvenance {
			t.Errorf("row %s %s has reference %q", r.Class, r.Key, r.Reference)
		}
		if strings.HasPrefix(r.Key, "tiger:") || r.Key == "source" || r.Key == "highway" {
			t.Errorf("row for skipped key %s", r.Key)
		}
		rows[[2]string{r.Class, r.Key}] = r
	}
	for _, w := range want {
		t.Run(w.class+"/"+w.key, func(t *testing.T) {
			r, ok := rows[[2]string{w.class, w.key}]
			if !ok {
				t.Fatalf("no row")
			}
			got := [2]counts{{r.ImportWith, r.ImportTotal}, {r.ReferenceWith, r.ReferenceTotal}}
			if got != [2]counts{w.tiger, w.other} {
				t.Errorf("tiger, other = %v, want %v (osmium tags-count)", got, [2]counts{w.tiger, w.other})
			}
		})
	}
}

func TestParseProvenance(t *testing.T) {
	tags := osm.Tags{{Key: "highway", Value: "residential"}, {Key: "tiger:cfcc", Value: "A41"}, {Key: "source", Value: "Vellmar County GIS"}}
	cases := []struct {
		name, spec string
		match      bool
		bad        bool
	}{
		{"prefix", "tiger:*", true, false},
		{"prefix miss", "gnis:*", false, false},
		{"key", "source", true, false},
		{"key=value", "source=Vellmar County GIS", true, false},
		{"key=value miss", "source=survey", false, false},
		{"key~regex", "source~(?i)county gis$", true, false},
		{"key~regex miss", "source~^survey", false, false},
		{"bad regex", "source~(", false, true},
		{"no key", "=x", false, true},
		{"empty", "", false, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p, err := ParseProvenance(c.spec)
			if c.bad {
				if err == nil {
					t.Fatalf("ParseProvenance(%q) accepted", c.spec)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if got := p.Match(tags); got != c.match {
				t.Errorf("Match = %v, want %v", got, c.match)
			}
		})
	}
}

var clUpdate = flag.Bool("update-checklist", false, "rewrite the checklist golden files in testdata")

// TestChecklistMarkdownGolden renders the snapshot checklist of the Delaware
// counts (osmium tags-count figures of TestSnapshotChecklistDelaware:
// tiger-tagged vs other highway=residential and highway=service ways) and
// compares it with testdata/checklist_delaware.md.golden (regenerate with
// -update-checklist; a mismatch is saved beside it as _got).
func TestChecklistMarkdownGolden(t *testing.T) {
	mk := func(total int, with map[string]int) tally {
		return tally{total: total, with: with, gained: map[string]int{}}
	}
	counts := map[string]*[4]tally{
		"highway=residential": {
			grpImport:  mk(18721, map[string]int{"name": 16893, "oneway": 1069, "surface": 215, "lanes": 169, "access": 94, "maxspeed": 73}),
			grpControl: mk(5598, map[string]int{"name": 4535, "oneway": 770, "surface": 246, "lanes": 104, "access": 20, "maxspeed": 18}),
		},
		"highway=service": {
			grpImport:  mk(2135, map[string]int{"service": 353, "access": 1303, "name": 402, "oneway": 64, "lanes": 7, "surface": 5}),
			grpControl: mk(10167, map[string]int{"service": 4568, "access": 1016, "name": 347, "oneway": 1163, "lanes": 158, "surface": 141}),
		},
	}
	cl := &Checklist{Import: "tiger:*", Mode: "snapshot", Provenance: "tiger:*"}
	opts := Options{MinShare: 0.01}.withDefaults()
	if err := cl.fill(rules.Default(), counts, []refGroup{{RefWithoutProvenance, grpControl}}, opts, false, nil); err != nil {
		t.Fatal(err)
	}
	var got bytes.Buffer
	if err := cl.WriteMarkdown(&got); err != nil {
		t.Fatal(err)
	}
	golden := filepath.Join("testdata", "checklist_delaware.md.golden")
	if *clUpdate {
		if err := os.WriteFile(golden, got.Bytes(), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	want, err := os.ReadFile(golden)
	if err != nil {
		t.Fatalf("%v (run with -update-checklist to create it)", err)
	}
	if !bytes.Equal(got.Bytes(), want) {
		os.WriteFile(golden+"_got", got.Bytes(), 0o644)
		t.Errorf("markdown differs from %s; got saved as %s_got", golden, golden)
	}
	// surface on service roads: 5/2135 vs 141/10167 is lower and significant;
	// name on residential roads: 90.2% vs 81.0% is higher and not flagged.
	for _, r := range cl.Rows {
		if r.Class == "highway=residential" && r.Key == "name" && r.Neglected {
			t.Errorf("a higher share was flagged: %+v", r)
		}
	}
	if len(cl.Neglected(RefWithoutProvenance)) == 0 {
		t.Errorf("nothing flagged")
	}
}

func ExampleParseProvenance() {
	p, _ := ParseProvenance("tiger:*")
	fmt.Println(p.Match(osm.Tags{{Key: "highway", Value: "residential"}, {Key: "tiger:cfcc", Value: "A41"}}))
	fmt.Println(p.Match(osm.Tags{{Key: "highway", Value: "residential"}, {Key: "source", Value: "survey"}}))
	// Output:
	// true
	// false
}
