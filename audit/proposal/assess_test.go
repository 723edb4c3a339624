package proposal

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// TestReadOSMProposalOsmChange reads a real OsmChange file the osm module
// ships (github.com/paulmach/osm v0.8.0 testdata/changeset_38162210.osc,
// © OpenStreetMap contributors, ODbL). Expected figures from osmium-tool
// 1.15.0: `osmium fileinfo -e` counts 244 nodes and 23 ways (267 changes);
// `osmium cat -f opl` shows 6 tagged nodes and 21 tagged ways (27 features),
// 10 of those ways refer to nodes the file does not hold.
func TestReadOSMProposalOsmChange(t *testing.T) {
	ctx := context.Background()
	path := worldtest.OSMFixture(t, "changeset_38162210.osc")
	rd, err := osmfile.OpenFile(ctx, path, osmfile.ReadOptions{})
	if err != nil {
		t.Skipf("osm module testdata: %v", err)
	}
	defer rd.Close()
	viaIngest, err := ReadOSM(ctx, path, readerObjects(rd), rules.Default(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	viaXML, err := ReadOSM(ctx, path, XMLObjects(ctx, path, f), rules.Default(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range []*Proposal{viaIngest, viaXML} {
		asCheckOsc(t, p)
	}
}

func asCheckOsc(t *testing.T, p *Proposal) {
	t.Helper()
	pr := p.Profile()
	if pr.Features != 27 || pr.Changes != 267 || pr.Changesets != 1 {
		t.Errorf("features %d, changes %d, changesets %d; want 27, 267, 1 (osmium)", pr.Features, pr.Changes, pr.Changesets)
	}
	missing := 0
	for _, w := range p.Warnings {
		if strings.Contains(w, "are not in the file") {
			missing++
		}
	}
	if missing != 10 {
		t.Errorf("%d warnings about missing nodes, want 10 (osmium):\n%s", missing, strings.Join(p.Warnings, "\n"))
	}
}

// TestOSMXMLObjectsEditorFile reads a proposal as editors save it (the JOSM
// file format of the OSM wiki, "JOSM file format": negative ids for new
// objects, no version, action="delete" for deletions) and checks a syntax
// error is reported with its line.
func TestOSMXMLObjectsEditorFile(t *testing.T) {
	const doc = `<?xml version='1.0' encoding='UTF-8'?>
<osm version='0.6' generator='an editor' upload='never'>
  <node id='-1' lat='0.5' lon='0.5'><tag k='amenity' v='bench'/></node>
  <node id='-2' lat='0.0' lon='0.0'/>
  <node id='-3' lat='0.0' lon='0.001'/>
  <node id='-4' lat='0.001' lon='0.001'/>
  <node id='-5' lat='0.001' lon='0.0'/>
  <way id='-6'><nd ref='-2'/><nd ref='-3'/><nd ref='-4'/><nd ref='-5'/><nd ref='-2'/><tag k='building' v='yes'/></way>
  <way id='-7'><nd ref='-2'/><nd ref='-9'/><tag k='highway' v='service'/></way>
  <node id='12' version='3' action='delete' lat='1' lon='1'/>
</osm>`
	ctx := context.Background()
	p, err := ReadOSM(ctx, "edit.osm", XMLObjects(ctx, "edit.osm", strings.NewReader(doc)), rules.Default(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	if len(p.Features) != 3 || p.Changes != 7 || p.Deletes != 1 {
		t.Fatalf("features %d, changes %d, deletes %d; want 3, 7, 1", len(p.Features), p.Changes, p.Deletes)
	}
	kinds := map[string]GeomKind{}
	for _, f := range p.Features {
		kinds[f.ID] = f.Kind
	}
	if kinds["node/-1"] != KindPoint || kinds["way/-6"] != KindPolygon || kinds["way/-7"] != KindNone {
		t.Errorf("kinds %v", kinds)
	}
	if !strings.Contains(strings.Join(p.Warnings, "\n"), "way/-7: 1 of its 2 nodes are not in the file") {
		t.Errorf("warnings %q lack the missing node", p.Warnings)
	}
	bad := strings.Replace(doc, "<way id='-7'>", "<way id='-7'", 1)
	_, err = ReadOSM(ctx, "edit.osm", XMLObjects(ctx, "edit.osm", strings.NewReader(bad)), rules.Default(), Options{})
	if !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), "edit.osm: line 9") {
		t.Errorf("error %v; want ErrInvalid at line 9", err)
	}
}

// TestReadGeoJSONRFC7946 reads the example of RFC 7946 section 1.5 (kept in
// ../spatial/testdata/rfc7946_example.geojson, typed in from memory of the RFC
// as its README says). The polygon is the 1°×1° cell
// from (100°E, 0°) to (101°E, 1°N); on a sphere of radius R = 6,378,137 m
// (orb.EarthRadius) a cell between longitudes λ1, λ2 and latitudes φ1, φ2
// has area R²(λ2 − λ1)(sin φ2 − sin φ1) (the spherical zone formula, e.g.
// Snyder 1987, Map Projections: A Working Manual, USGS PP 1395, p. 16; the
// figure 1.2391e10 m² is worked out from it by hand here).
func TestReadGeoJSONRFC7946(t *testing.T) {
	f := filepath.Join("..", "spatial", "testdata", "rfc7946_example.geojson")
	data := asReadFile(t, f)
	p, err := ReadGeoJSON(context.Background(), f, bytes.NewReader(data), rules.Default(), Options{})
	if err != nil {
		t.Fatal(err)
	}
	pr := p.Profile()
	if len(pr.Classes) != 1 || pr.Classes[0].Class != "" {
		t.Fatalf("classes %+v; want one group without a class", pr.Classes)
	}
	c := pr.Classes[0]
	if c.Points != 1 || c.Lines != 1 || c.Polygons != 1 {
		t.Errorf("points %d, lines %d, polygons %d; want 1 each", c.Points, c.Lines, c.Polygons)
	}
	const R = 6378137.0
	want := R * R * (math.Pi / 180) * math.Sin(math.Pi/180)
	if math.Abs(c.AreaM2-want)/want > 1e-3 {
		t.Errorf("area %.6g m², want %.6g (spherical zone formula)", c.AreaM2, want)
	}
	// 1 point; 4 positions + a way; a 4-node ring + a way.
	if pr.Changes != 1+5+5 {
		t.Errorf("changes %d, want 11", pr.Changes)
	}
	if got := p.Features[1].Tags.Find("prop1"); got != "0.0" {
		t.Errorf("numeric prop1 written as %q, want %q", got, "0.0")
	}
	if p.Features[2].Tags.Find("prop1") != "" {
		t.Errorf("object-valued prop1 kept: %v", p.Features[2].Tags)
	}
	joined := strings.Join(p.Warnings, "\n")
	for _, w := range []string{`feature 1: property "prop1" is a number`, `feature 2: property "prop1" is an object or array`} {
		if !strings.Contains(joined, w) {
			t.Errorf("warnings lack %q:\n%s", w, joined)
		}
	}
}

func asReadFile(tb testing.TB, path string) []byte {
	tb.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		tb.Fatal(err)
	}
	return data
}

func TestReadGeoJSONBadInput(t *testing.T) {
	cases := []struct {
		name, in string
		errIs    bool   // ErrInvalid expected
		errHas   string // in the error
		warnHas  string // in the warnings (no error)
		features int
	}{
		{"no features", `{"type":"FeatureCollection","features":[]}`, true, "no features", "", 0},
		{"not json", `hello`, true, "not JSON", "", 0},
		{"not an object", `[1,2]`, true, "not a GeoJSON object", "", 0},
		{"wrong type", `{"type":"Point","coordinates":[1,2]}`, true, `GeoJSON type "Point"`, "", 0},
		{"truncated", `{"type":"FeatureCollection","features":[{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{}}, {"type":`, true, "feature 1", "", 0},
		{"mixed geometry", `{"type":"FeatureCollection","features":[
			{"type":"Feature","geometry":{"type":"GeometryCollection","geometries":[{"type":"Point","coordinates":[1,2]}]},"properties":{"shop":"bakery"}},
			{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{"shop":"bakery"}}]}`, false, "", "feature 0: a GeometryCollection mixes geometries", 1},
		{"bad coordinates", `{"type":"FeatureCollection","features":[
			{"type":"Feature","geometry":{"type":"Point","coordinates":[200,2]},"properties":{}},
			{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{}}]}`, false, "", "feature 0: coordinates outside", 1},
		{"open ring", `{"type":"FeatureCollection","features":[
			{"type":"Feature","geometry":{"type":"Polygon","coordinates":[[[0,0],[1,0],[1,1],[0,1]]]},"properties":{}},
			{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{}}]}`, false, "", "feature 0: a polygon ring needs 4", 1},
		{"no geometry", `{"type":"FeatureCollection","features":[
			{"type":"Feature","geometry":null,"properties":{}},
			{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{"levels":3,"lit":true,"x":null}}]}`, false, "", `feature 1: property "lit" is a boolean; written as the text "true"`, 1},
		{"single feature", `{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{"amenity":"bench"}}`, false, "", "", 1},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			p, err := ReadGeoJSON(context.Background(), "in.geojson", strings.NewReader(c.in), rules.Default(), Options{})
			if c.errIs {
				if !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), c.errHas) || !strings.HasPrefix(err.Error(), "in.geojson: ") {
					t.Fatalf("error %v; want ErrInvalid naming the file and %q", err, c.errHas)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if len(p.Features) != c.features {
				t.Errorf("%d features, want %d", len(p.Features), c.features)
			}
			if c.warnHas != "" && !strings.Contains(strings.Join(p.Warnings, "\n"), c.warnHas) {
				t.Errorf("warnings %q lack %q", p.Warnings, c.warnHas)
			}
		})
	}
}

func TestProposalLimits(t *testing.T) {
	var b strings.Builder
	b.WriteString(`{"type":"FeatureCollection","features":[`)
	for i := range 10 {
		if i > 0 {
			b.WriteString(",")
		}
		fmt.Fprintf(&b, `{"type":"Feature","geometry":{"type":"Point","coordinates":[%d,1]},"properties":{}}`, i)
	}
	b.WriteString("]}")
	p, err := ReadGeoJSON(context.Background(), "big.geojson", strings.NewReader(b.String()), rules.Default(), Options{MaxFeatures: 4})
	if !errors.Is(err, ErrInvalid) || !strings.Contains(err.Error(), "more than 4 features") {
		t.Fatalf("error %v; want the feature limit", err)
	}
	if len(p.Features) != 4 {
		t.Errorf("partial proposal holds %d features, want 4", len(p.Features))
	}
}

// TestChangesetsNeeded checks the split at the OSM API 0.6 limit of 10,000
// changes per changeset (OSM wiki, "API v0.6", capabilities).
func TestChangesetsNeeded(t *testing.T) {
	for _, c := range []struct{ changes, want int }{{0, 0}, {1, 1}, {10000, 1}, {10001, 2}, {250000, 25}} {
		if got := ChangesetsNeeded(c.changes); got != c.want {
			t.Errorf("ChangesetsNeeded(%d) = %d, want %d", c.changes, got, c.want)
		}
	}
}

// TestNearestImportsDistance checks the distance on hand-worked cases: total
// variation distance ½Σ|p−q| (the textbook definition) and the mean key gap.
func TestNearestImportsDistance(t *testing.T) {
	pr := &Profile{Classes: []ClassProfile{
		// source is a provenance key: left out of the distance.
		{Class: "building=*", Features: 75, Keys: []KeyShare{{Key: "addr:street", With: 60}, {Key: "source", With: 75}}},
		{Class: "amenity=bench", Features: 25},
	}}
	eps := []episode.Episode{{ID: "imp-1"}, {ID: "imp-2"}, {ID: "imp-3"}}
	ips := []importProfile{
		// Same mix, addr:street on 60 of 100 as in the proposal: distance 0.
		{features: 100, classes: map[string]int{"building=*": 75, "amenity=bench": 25}, keys: map[string]int{"addr:street": 60}},
		// Disjoint classes: TV 1; keys: addr:street 0.6 vs 0, name 0 vs 1: K = (0.6 + 1)/2 = 0.8; D = 0.9.
		{features: 10, classes: map[string]int{"shop=*": 10}, keys: map[string]int{"name": 10}},
		// Only buildings: TV = ½(|0.75−1| + |0.25−0|) = 0.25; addr:street 0.6 vs 0.3: K = 0.3; D = 0.275.
		{features: 40, classes: map[string]int{"building=*": 40}, keys: map[string]int{"addr:street": 12}},
	}
	got := nearestImports(pr, eps, ips, 3, rules.Default())
	want := []struct {
		id        string
		d, tv, kd float64
	}{{"imp-1", 0, 0, 0}, {"imp-3", 0.275, 0.25, 0.3}, {"imp-2", 0.9, 1, 0.8}}
	if len(got) != len(want) {
		t.Fatalf("got %d matches, want %d", len(got), len(want))
	}
	for i, w := range want {
		g := got[i]
		if g.Episode.ID != w.id || math.Abs(g.Distance-w.d) > 1e-12 || math.Abs(g.ClassDistance-w.tv) > 1e-12 || math.Abs(g.TagDistance-w.kd) > 1e-12 {
			t.Errorf("match %d = %s D %.4f TV %.4f K %.4f; want %s %.4f %.4f %.4f", i, g.Episode.ID, g.Distance, g.ClassDistance, g.TagDistance, w.id, w.d, w.tv, w.kd)
		}
	}
}

func TestAddPastAudits(t *testing.T) {
	rel := func(v float64) *float64 { return &v }
	a := &Assessment{
		Profile: Profile{Features: 200, Classes: []ClassProfile{{Class: "building=*", Features: 200, Keys: []KeyShare{{Key: "addr:street", With: 190}, {Key: "building:levels", With: 4}}}}},
		Nearest: []ImportMatch{{Episode: episode.Episode{ID: "imp-1"}}, {Episode: episode.Episode{ID: "imp-2"}}},
	}
	effects := map[string][]did.Effect{
		"imp-1": {{Layer: "attribute", Estimator: did.EstimatorCS, RelativeEffect: rel(-0.3), CI95: [2]float64{-0.5, -0.1}},
			{Layer: "attribute", Estimator: did.EstimatorPPML, RelativeEffect: rel(-0.9), CI95: [2]float64{-0.95, -0.85}}},
		"imp-2": {{Layer: "attribute", Estimator: did.EstimatorCS, RelativeEffect: rel(-0.1), CI95: [2]float64{-0.2, 0.05}},
			{Layer: "attribute", Estimator: did.EstimatorPPML, RelativeEffect: rel(-0.2), CI95: [2]float64{-0.4, 0.1}},
			{Layer: "geometry", Estimator: did.EstimatorPPML, RelativeEffect: rel(0.3), CI95: [2]float64{0.3, 0.3}, NoInterval: true, TreatedUnits: 2}},
		"imp-9": {{Layer: "attribute", Estimator: did.EstimatorPPML, RelativeEffect: rel(5), CI95: [2]float64{4, 6}}},
	}
	cls := map[string]*checklist.Checklist{"imp-1": {Rows: []checklist.Row{
		{Class: "building=*", Key: "building:levels", Reference: checklist.RefMatchedControls, Neglected: true, ImportShare: 0.05, ReferenceShare: 0.55},
		{Class: "building=*", Key: "addr:street", Reference: checklist.RefMatchedControls, Neglected: true, ImportShare: 0.2, ReferenceShare: 0.6},
	}}}
	a.AddPastAudits(effects, cls)
	if len(a.Expected) != 1 {
		t.Fatalf("expected ranges %+v", a.Expected)
	}
	r := a.Expected[0]
	// The range is the headline's, as each past audit's summary reports it;
	// a headline without a reliable interval is named, not ranged.
	if r.Estimator != did.Headline || r.Low != -0.95 || r.High != 0.1 || len(r.Imports) != 2 {
		t.Errorf("range %+v; want ppml-twfe from -0.95 to 0.1 over imp-1 and imp-2", r)
	}
	if !strings.Contains(strings.Join(a.Notes, "\n"), "layer geometry: past import imp-2 has no reliable interval") {
		t.Errorf("notes %v; want imp-2's geometry named as without an interval", a.Notes)
	}
	if len(a.Lacking) != 1 || a.Lacking[0].Key != "building:levels" {
		t.Errorf("lacking %+v; want building:levels only (addr:street is on 95%% of proposed features)", a.Lacking)
	}
}

// TestAssessDuplicatesSimulated builds a proposal from features already in a
// simulated store: shifted by 3 m (less than the 15 m distance) every one is
// a likely duplicate; shifted 1° east, none.
func TestAssessDuplicatesSimulated(t *testing.T) {
	if testing.Short() {
		t.Skip("simulated world: skipped with -short")
	}
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months, cfg.Treated, cfg.Waves = 4, 4, 12, 4, 2
	cfg.ImportBuildings, cfg.ImportPOIs = 60, 10
	r := worldtest.ChecklistRules(t)
	w := worldtest.BuildWith(t, cfg, r)
	ctx := context.Background()
	for _, c := range []struct {
		name  string
		shift orb.Point // metres east, north
		all   bool
	}{{"shifted 3 m", orb.Point{2.1, 2.1}, true}, {"shifted far", orb.Point{1e5, 0}, false}} {
		t.Run(c.name, func(t *testing.T) {
			gj := asProposalFromStore(t, w.Store, r, c.shift)
			p, err := ReadGeoJSON(ctx, "from-store.geojson", bytes.NewReader(gj), r, Options{})
			if err != nil {
				t.Fatal(err)
			}
			a, err := Assess(ctx, w.Store, r, p, AssessOptions{Units: w.Units, MaxDuplicates: 1 << 30})
			if err != nil {
				t.Fatal(err)
			}
			want := 0
			if c.all {
				want = len(p.Features)
			}
			if a.DuplicateCount != want {
				dup := map[string]bool{}
				for _, d := range a.Duplicates {
					dup[d.Proposed] = true
				}
				for i, f := range p.Features {
					if dup[f.ID] != c.all && i < 10 {
						t.Logf("%s %s %v duplicate=%v", f.ID, f.Class, f.At, dup[f.ID])
					}
				}
				t.Errorf("%d of %d proposed features are duplicates, want %d", a.DuplicateCount, len(p.Features), want)
			}
			if len(a.Nearest) == 0 {
				t.Errorf("no past import listed")
			}
			var md bytes.Buffer
			if err := a.WriteMarkdown(&md); err != nil {
				t.Fatal(err)
			}
			for _, s := range []string{"ODbL", "imports mailing list", "dedicated import account", "conflation"} {
				if !strings.Contains(md.String(), s) {
					t.Errorf("report lacks the review point %q", s)
				}
			}
		})
	}
}

// asProposalFromStore writes every feature alive at the store's end as a
// GeoJSON feature with its current tags and shape, moved by shift metres.
func asProposalFromStore(tb testing.TB, st *ingest.Store, r *rules.RuleSet, shift orb.Point) []byte {
	tb.Helper()
	ctx := context.Background()
	end := time.Now()
	move := func(p orb.Point) []float64 {
		const m = 111320.0
		return []float64{p[0] + shift[0]/(m*math.Cos(p[1]*math.Pi/180)), p[1] + shift[1]/m}
	}
	var feats []map[string]any
	props := func(tags osm.Tags) map[string]any {
		m := map[string]any{}
		for _, t := range tags {
			m[t.Key] = t.Value
		}
		return m
	}
	var last osm.Object
	flush := func() {
		if last == nil {
			return
		}
		defer func() { last = nil }()
		switch v := last.(type) {
		case *osm.Node:
			if v.Visible && r.Class(v.Tags) != "" {
				feats = append(feats, map[string]any{"type": "Feature", "properties": props(v.Tags),
					"geometry": map[string]any{"type": "Point", "coordinates": move(orb.Point{v.Lon, v.Lat})}})
			}
		case *osm.Way:
			if !v.Visible || r.Class(v.Tags) == "" {
				return
			}
			var line [][]float64
			for _, wn := range v.Nodes {
				p, ok, err := st.NodeAt(ctx, wn.ID, end)
				if err != nil || !ok {
					tb.Fatalf("way %d: node %d: %v %v", v.ID, wn.ID, ok, err)
				}
				line = append(line, move(p))
			}
			g := map[string]any{"type": "LineString", "coordinates": line}
			if len(line) >= 4 && v.Nodes[0].ID == v.Nodes[len(v.Nodes)-1].ID {
				g = map[string]any{"type": "Polygon", "coordinates": [][][]float64{line}}
			}
			feats = append(feats, map[string]any{"type": "Feature", "properties": props(v.Tags), "geometry": g})
		}
	}
	for _, t := range []osm.Type{osm.TypeNode, osm.TypeWay} {
		err := st.ScanVersions(ctx, t, func(o osm.Object) error {
			if last != nil && last.ObjectID().Ref() != o.ObjectID().Ref() {
				flush()
			}
			last = o
			return nil
		})
		if err != nil {
			tb.Fatal(err)
		}
		flush()
	}
	data, err := json.Marshal(map[string]any{"type": "FeatureCollection", "features": feats})
	if err != nil {
		tb.Fatal(err)
	}
	return data
}

// asBenchReader yields n tagged nodes spread over a 1°×1° square, version 1,
// in id order: a store of n point features.
type asBenchReader struct {
	n, i int
	rng  *rand.Rand
	item osmfile.Item
}

var asBenchClasses = [...][2]string{{"amenity", "bench"}, {"amenity", "cafe"}, {"shop", "bakery"}, {"tourism", "information"}, {"amenity", "post_box"}}

func (b *asBenchReader) Scan() bool {
	if b.i >= b.n {
		return false
	}
	b.i++
	c := asBenchClasses[b.i%len(asBenchClasses)]
	n := &osm.Node{ID: osm.NodeID(b.i), Version: 1, ChangesetID: osm.ChangesetID(1 + b.i/5000), UserID: osm.UserID(1 + b.i%97),
		User: "mapper", Visible: true, Timestamp: time.Date(2020, 1, 1, 0, 0, 0, 0, time.UTC).Add(time.Duration(b.i) * time.Minute),
		Lon: 10 + b.rng.Float64(), Lat: 50 + b.rng.Float64(), Tags: osm.Tags{{Key: c[0], Value: c[1]}}}
	if b.i%3 == 0 {
		n.Tags = append(n.Tags, osm.Tag{Key: "name", Value: "x"})
	}
	b.item = osmfile.Item{Object: n, Pos: osmfile.Position{Element: int64(b.i)}}
	return true
}
func (b *asBenchReader) Item() osmfile.Item     { return b.item }
func (b *asBenchReader) Err() error             { return nil }
func (b *asBenchReader) Close() error           { return nil }
func (b *asBenchReader) Format() osmfile.Format { return osmfile.FormatXML }
func (b *asBenchReader) BytesRead() int64       { return int64(b.i) }

// BenchmarkAssess assesses a 100,000-point GeoJSON proposal (read included)
// against a store of 1,000,000 classified point features over the same
// square, with 9×9 km-ish tiles (zoom 12) as units. The store is built once,
// outside the timer.
func BenchmarkAssess(b *testing.B) {
	const storeN, propN = 1_000_000, 100_000
	ctx := context.Background()
	st, err := ingest.Open(b.TempDir(), ingest.DefaultOptions())
	if err != nil {
		b.Fatal(err)
	}
	defer st.Close()
	opts := ingest.IngestOptions{Open: func(context.Context, string) (osmfile.Reader, error) {
		return &asBenchReader{n: storeN, rng: rand.New(rand.NewPCG(1, 2))}, nil
	}}
	// Ingest hashes the named file to record it; the objects come from Open.
	name := filepath.Join(b.TempDir(), "generated-store")
	if err := os.WriteFile(name, []byte("1,000,000 generated point features\n"), 0o644); err != nil {
		b.Fatal(err)
	}
	if _, err := ingest.Ingest(ctx, st, []string{name}, opts); err != nil {
		b.Fatal(err)
	}
	r := rules.Default()
	if _, err := layers.Run(ctx, st, r, layers.Options{}); err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	var gj bytes.Buffer
	gj.WriteString(`{"type":"FeatureCollection","features":[`)
	for i := range propN {
		if i > 0 {
			gj.WriteByte(',')
		}
		c := asBenchClasses[i%len(asBenchClasses)]
		fmt.Fprintf(&gj, `{"type":"Feature","geometry":{"type":"Point","coordinates":[%.7f,%.7f]},"properties":{%q:%q,"source":"Vellmar County GIS"}}`,
			10+rng.Float64(), 50+rng.Float64(), c[0], c[1])
	}
	gj.WriteString("]}")
	units, err := spatial.Parse("tiles:12", spatial.Options{Bound: orb.Bound{Min: orb.Point{10, 50}, Max: orb.Point{11, 51}}})
	if err != nil {
		b.Fatal(err)
	}
	data := gj.Bytes()
	b.ReportAllocs()
	b.ResetTimer()
	var a *Assessment
	for b.Loop() {
		p, err := ReadGeoJSON(ctx, "bench.geojson", bytes.NewReader(data), r, Options{})
		if err != nil {
			b.Fatal(err)
		}
		if a, err = Assess(ctx, st, r, p, AssessOptions{Units: units}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(propN)*float64(b.N)/b.Elapsed().Seconds(), "features/s")
	b.ReportMetric(float64(a.DuplicateCount), "duplicates")
}

// FuzzReadProposal feeds arbitrary bytes to both proposal readers: they
// must return features or an error, never panic.
func FuzzReadProposal(f *testing.F) {
	f.Add([]byte(`{"type":"FeatureCollection","features":[{"type":"Feature","geometry":{"type":"Point","coordinates":[1,2]},"properties":{"amenity":"bench","n":1}}]}`))
	f.Add([]byte(`{"type":"Feature","geometry":{"type":"Polygon","coordinates":[[[0,0],[1,0],[1,1],[0,0]]]},"properties":null}`))
	f.Add([]byte(`<osm><node id="-1" lat="1" lon="2"><tag k="amenity" v="bench"/></node><way id="-2"><nd ref="-1"/><nd ref="-1"/><tag k="highway" v="path"/></way><relation id="-3"><member type="way" ref="-2" role="outer"/><tag k="type" v="multipolygon"/></relation></osm>`))
	f.Add([]byte(`<osmChange><delete><node id="5" version="2" lat="1" lon="2"/></delete></osmChange>`))
	r := rules.Default()
	f.Fuzz(func(t *testing.T, data []byte) {
		ctx := context.Background()
		if p, err := ReadGeoJSON(ctx, "fuzz.geojson", bytes.NewReader(data), r, Options{MaxFeatures: 1000, MaxNodes: 10000}); err == nil {
			p.Profile()
		}
		if p, err := ReadOSM(ctx, "fuzz.osm", XMLObjects(ctx, "fuzz.osm", bytes.NewReader(data)), r, Options{MaxFeatures: 1000, MaxNodes: 10000}); err == nil {
			p.Profile()
		}
	})
}
func ExampleChangesetsNeeded() {
	// A proposal of 24,500 OSM objects (way nodes included) at the OSM API
	// 0.6 limit of 10,000 changes per changeset.
	fmt.Println(ChangesetsNeeded(24500))
	// Output: 3
}
