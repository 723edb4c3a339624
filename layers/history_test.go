package layers

import (
	"context"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmxml"
)

// osmTestdata returns the path of a file in the osm module's testdata (real
// OSM extracts and histories shipped with github.com/paulmach/osm v0.8.0),
// preferring the copy in ../ingest/testdata when present.
func osmTestdata(tb testing.TB, rel string) string {
	tb.Helper()
	if p := filepath.Join("..", "ingest", "testdata", filepath.Base(rel)); fileExists(p) {
		return p
	}
	out, err := exec.Command("go", "env", "GOMODCACHE").Output()
	if err != nil {
		tb.Fatalf("go env GOMODCACHE: %v", err)
	}
	p := filepath.Join(strings.TrimSpace(string(out)), "github.com", "paulmach", "osm@v0.8.0", rel)
	if !fileExists(p) {
		tb.Skipf("%s not in the module cache (go mod download github.com/paulmach/osm@v0.8.0)", p)
	}
	return p
}

func fileExists(p string) bool {
	_, err := os.Stat(p)
	return err == nil
}

// readOSMXML decodes every object of an OSM XML file with osmxml.
func readOSMXML(tb testing.TB, path string) []osm.Object {
	tb.Helper()
	f, err := os.Open(path)
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	sc := osmxml.New(context.Background(), f)
	defer sc.Close()
	var out []osm.Object
	for sc.Scan() {
		out = append(out, sc.Object())
	}
	if err := sc.Err(); err != nil {
		tb.Fatalf("%s: %v", path, err)
	}
	return out
}

func runPass(tb testing.TB, src Source) Summary {
	tb.Helper()
	s, err := Run(context.Background(), src, rules.Default(), Options{BatchSize: 7})
	if err != nil {
		tb.Fatalf("Run: %v", err)
	}
	return s
}

func eventsOf(tb testing.TB, src DerivedReader, match func(*Event) bool) []*Event {
	tb.Helper()
	var out []*Event
	err := ScanEvents(context.Background(), src, time.Time{}, time.Time{}, func(e *Event) error {
		if match(e) {
			out = append(out, e)
		}
		return nil
	})
	if err != nil {
		tb.Fatal(err)
	}
	return out
}

func mean(pts ...orb.Point) orb.Point {
	var c orb.Point
	for _, p := range pts {
		c[0] += p[0] / float64(len(pts))
		c[1] += p[1] / float64(len(pts))
	}
	return c
}

func ts(s string) time.Time {
	t, err := time.Parse(time.RFC3339, s)
	if err != nil {
		panic(err)
	}
	return t
}

// TestWay6394949History checks the pass against one real way's full history,
// worked out by hand from the XML: way 6394949 and every version of its nodes,
// from github.com/paulmach/osm v0.8.0 annotate/testdata/way_6394949.osm (OSM
// data © OpenStreetMap contributors, ODbL). Rules: rules.Default(), in which
// highway is a class key (detail value), and created_by, note and tiger:* are
// provenance keys.
//
//	v1 2007-09-17T08:00:17Z cs 448653: first version with highway=residential
//	   → new_feature, key highway added (family "other": no family lists it).
//	   Nodes at that time: 53101285 v1, 53142906 v1, 53142908 v1.
//	v2 2008-04-08T09:24:18Z cs 84058: same node list; created_by and note
//	   added, tiger:name_type Way→way. All provenance → one bookkeeping event.
//	   Nodes: 53101285 v2 (09:23:47), 53142906 v2 (09:24:18), 53142908 v2
//	   (09:24:00).
//	v3 2008-10-19T02:20:15Z cs 442821: six nodes inserted → geometry
//	   (way nodes changed); created_by changed, tiger:name_type way→Way:
//	   provenance only → bookkeeping. Nodes valid at 02:20:15: 53101285 v2
//	   (its v3 is 02:20:19, later), 305541870..305541875 v1, 53142906 v3,
//	   53142908 v3 (02:19:16).
//	v4 2008-10-19T02:20:23Z: same nodes, same tags → no event.
//	v5 2010-04-03T06:15:20Z cs 4309928: node 683050072 inserted → geometry;
//	   created_by removed, tiger:name_type Way→way → bookkeeping. Nodes at
//	   06:15:20: the v3 positions of 305541870..305541875 and 53142908 v5,
//	   683050072 v1, 53101285 v4 and 53142906 v4 (positions as their v3).
func TestWay6394949History(t *testing.T) {
	src := newMemSource(t, readOSMXML(t, osmTestdata(t, "annotate/testdata/way_6394949.osm"))...)
	runPass(t, src)

	pt := func(lat, lon float64) orb.Point { return orb.Point{lon, lat} }
	type want struct {
		version  int
		layer    Layer
		geometry GeometryChange
		time     string
		cs       osm.ChangesetID
		keys     []KeyTouch
		at       orb.Point
	}
	hw := []KeyTouch{{Key: "highway", Family: "other", Change: KeyAdded}}
	prov := func(k string, c KeyChange) KeyTouch {
		return KeyTouch{Key: k, Family: "provenance", Change: c, Provenance: true}
	}
	v1at := mean(pt(37.818127, -122.226179), pt(37.818627, -122.226779), pt(37.818727, -122.225979))
	v2at := mean(pt(37.8181128, -122.2259738), pt(37.818627, -122.226779), pt(37.818662, -122.2257335))
	v3at := mean(pt(37.8181128, -122.2259738), pt(37.8183344, -122.226276), pt(37.8185039, -122.2264133),
		pt(37.818653, -122.2265764), pt(37.8188971, -122.2266193), pt(37.819087, -122.2265764),
		pt(37.8191887, -122.2263618), pt(37.8191276, -122.2261215), pt(37.8191209, -122.2258468))
	v5at := mean(pt(37.8180631, -122.2260013), pt(37.8183028, -122.2262988), pt(37.8184766, -122.2264517),
		pt(37.818653, -122.2265764), pt(37.8188527, -122.2265335), pt(37.8189057, -122.2264838),
		pt(37.8189353, -122.2263551), pt(37.8189226, -122.2261969), pt(37.8188527, -122.2259434),
		pt(37.8188336, -122.2257288))
	wants := []want{
		{1, NewFeature, 0, "2007-09-17T08:00:17Z", 448653, hw, v1at},
		{2, Bookkeeping, 0, "2008-04-08T09:24:18Z", 84058,
			[]KeyTouch{prov("created_by", KeyAdded), prov("note", KeyAdded), prov("tiger:name_type", KeyModified)}, v2at},
		{3, Geometry, WayNodesChanged, "2008-10-19T02:20:15Z", 442821, nil, v3at},
		{3, Bookkeeping, 0, "2008-10-19T02:20:15Z", 442821,
			[]KeyTouch{prov("created_by", KeyModified), prov("tiger:name_type", KeyModified)}, v3at},
		{5, Geometry, WayNodesChanged, "2010-04-03T06:15:20Z", 4309928, nil, v5at},
		{5, Bookkeeping, 0, "2010-04-03T06:15:20Z", 4309928,
			[]KeyTouch{prov("created_by", KeyRemoved), prov("tiger:name_type", KeyModified)}, v5at},
	}
	got := eventsOf(t, src, func(e *Event) bool { return e.Object.Type() == osm.TypeWay })
	if len(got) != len(wants) {
		for _, e := range got {
			t.Logf("got %s v%d %s", e.Object, e.Object.Version(), e.Layer)
		}
		t.Fatalf("got %d way events, want %d", len(got), len(wants))
	}
	for i, w := range wants {
		e := got[i]
		if e.Object.Version() != w.version || e.Layer != w.layer || e.Geometry != w.geometry ||
			!e.Time.Equal(ts(w.time)) || e.Changeset != w.cs || e.Class != "highway=residential" {
			t.Errorf("event %d = %s %s geom %d %s cs %d class %q; want v%d %s geom %d %s cs %d",
				i, e.Object, e.Layer, e.Geometry, e.Time.Format(time.RFC3339), e.Changeset, e.Class,
				w.version, w.layer, w.geometry, w.time, w.cs)
		}
		if len(e.Keys) != len(w.keys) {
			t.Errorf("event %d keys = %+v, want %+v", i, e.Keys, w.keys)
		} else {
			for j := range w.keys {
				if e.Keys[j] != w.keys[j] {
					t.Errorf("event %d key %d = %+v, want %+v", i, j, e.Keys[j], w.keys[j])
				}
			}
		}
		// Stored positions have 1e-7 degree precision (encode.go).
		if !e.Located || math.Abs(e.Location[0]-w.at[0]) > 1e-7 || math.Abs(e.Location[1]-w.at[1]) > 1e-7 {
			t.Errorf("event %d at %v (located %v), want %v", i, e.Location, e.Located, w.at)
		}
	}
}

// TestWay6394949Vertices checks the node side of the same file. Node 53101285
// carries only source and tiger:* tags, so it has no class; its v2 (moved
// 2008-04-08T09:23:47Z) and v3 (moved 2008-10-19T02:20:19Z) are vertex moves
// counted for the way holding it then (6394949 v1 and v3: highway=residential).
// Its v4 drops every tag: tag changes on a classless vertex yield nothing.
// Distances: haversine with R = 6378137 m (orb.EarthRadius), computed here
// independently of orb/geo.
func TestWay6394949Vertices(t *testing.T) {
	src := newMemSource(t, readOSMXML(t, osmTestdata(t, "annotate/testdata/way_6394949.osm"))...)
	runPass(t, src)
	got := eventsOf(t, src, func(e *Event) bool { return e.Object.Type() == osm.TypeNode && e.Object.Ref() == 53101285 })
	want := []struct {
		version  int
		from, to orb.Point
	}{
		{2, orb.Point{-122.226179, 37.818127}, orb.Point{-122.2259738, 37.8181128}},
		{3, orb.Point{-122.2259738, 37.8181128}, orb.Point{-122.2260013, 37.8180631}},
	}
	if len(got) != len(want) {
		t.Fatalf("node 53101285: %d events, want %d", len(got), len(want))
	}
	for i, w := range want {
		e := got[i]
		d := haversine(w.from, w.to, 6378137)
		if e.Object.Version() != w.version || e.Layer != Geometry || e.Geometry != WayNodeMoved ||
			e.Class != "highway=residential" || math.Abs(e.Distance-d) > 1e-6 {
			t.Errorf("event %d = v%d %s geom %d class %q %.3f m; want v%d geometry way-node-moved highway=residential %.3f m",
				i, e.Object.Version(), e.Layer, e.Geometry, e.Class, e.Distance, w.version, d)
		}
	}
	// Every node of the file is a classless vertex: no new_feature, attribute
	// or deletion event may come from nodes.
	for _, e := range eventsOf(t, src, func(e *Event) bool { return e.Object.Type() == osm.TypeNode }) {
		if e.Layer != Geometry || e.Geometry != WayNodeMoved {
			t.Errorf("%s v%d: %s event from a classless vertex", e.Object, e.Object.Version(), e.Layer)
		}
	}
}

// haversine is the great-circle distance in metres between two lon/lat points
// on a sphere of radius r (R. W. Sinnott, "Virtues of the Haversine", Sky and
// Telescope 68(2), 1984; formula as usually quoted, from memory).
func haversine(a, b orb.Point, r float64) float64 {
	rad := math.Pi / 180
	dlat := (b[1] - a[1]) * rad
	dlon := (b[0] - a[0]) * rad
	h := math.Sin(dlat/2)*math.Sin(dlat/2) + math.Cos(a[1]*rad)*math.Cos(b[1]*rad)*math.Sin(dlon/2)*math.Sin(dlon/2)
	return 2 * r * math.Asin(math.Sqrt(h))
}

// TestMoveDistance checks the distance a moved node records against a
// published worked example: Land's End (50°03′59″N, 5°42′53″W) to John
// o' Groats (58°38′38″N, 3°04′12″W) is 968.9 km on a sphere of radius 6371 km
// (C. Veness, "Calculate distance, bearing and more between Latitude/Longitude
// points", movable-type.co.uk; figure from memory). Classify uses orb's
// R = 6378137 m, so the published figure is scaled by 6378.137/6371; the
// tolerance, 0.1 km before scaling, is the rounding of the published figure.
func TestMoveDistance(t *testing.T) {
	dms := func(d, m, s float64) float64 { return d + m/60 + s/3600 }
	from := orb.Point{-dms(5, 42, 53), dms(50, 3, 59)}
	to := orb.Point{-dms(3, 4, 12), dms(58, 38, 38)}
	prev := &osm.Node{ID: 1, Version: 1, Visible: true, Lon: from[0], Lat: from[1],
		Tags: osm.Tags{{Key: "amenity", Value: "post_box"}}}
	cur := *prev
	cur.Version, cur.Lon, cur.Lat = 2, to[0], to[1]
	evs := Classify(prev, &cur, rules.Default(), nil)
	if len(evs) != 1 || evs[0].Geometry != NodeMoved || evs[0].Class != "amenity=post_box" {
		t.Fatalf("events = %+v, want one node-moved event", evs)
	}
	want := 968.9e3 * 6378.137 / 6371
	if d := evs[0].Distance; math.Abs(d-want) > 0.1e3*6378.137/6371 {
		t.Errorf("distance = %.1f m, want %.1f m ± 100 m (published 968.9 km at R = 6371 km)", d, want)
	}
	if d, h := evs[0].Distance, haversine(from, to, 6378137); math.Abs(d-h) > 1e-6 {
		t.Errorf("distance = %.6f m, independent haversine %.6f m", d, h)
	}
}
