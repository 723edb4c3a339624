package spatial

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/planar"
)

// sphereRect is the area of a longitude/latitude rectangle on a sphere of
// radius 6378137 m, R²·Δλ·(sin φ2 − sin φ1) (standard spherical geometry,
// e.g. Snyder 1987, USGS Professional Paper 1395).
func sphereRect(lon0, lat0, lon1, lat1 float64) float64 {
	const r = 6378137.0
	rad := math.Pi / 180
	return r * r * (lon1 - lon0) * rad * (math.Sin(lat1*rad) - math.Sin(lat0*rad))
}

// Source: the FeatureCollection example of RFC 7946 ("The GeoJSON Format"),
// section 1.5, copied into testdata/rfc7946_example.geojson from memory:
// a Point, a LineString and a Polygon, none with an "id" property.
func TestUnitsRFC7946Example(t *testing.T) {
	const file = "testdata/rfc7946_example.geojson"
	_, err := Parse(file, Options{})
	var ue *FileError
	if !errors.As(err, &ue) || ue.Feature != 2 || !errors.Is(err, ErrUnits) || !strings.Contains(err.Error(), file+": feature 2:") {
		t.Fatalf("default id property: got %v, want a FileError for feature 2 (the Polygon has no id)", err)
	}
	u, err := Parse(file, Options{IDProperty: "prop0"})
	if err != nil {
		t.Fatal(err)
	}
	if u.Len() != 1 || u.ID(0) != "value0" {
		t.Fatalf("units %d, id %q", u.Len(), u.ID(0))
	}
	if w := u.Warnings(); len(w) != 2 || !strings.Contains(w[0], "feature 0 is a Point") || !strings.Contains(w[1], "feature 1 is a LineString") {
		t.Errorf("warnings %q", w)
	}
	if i, ok := u.Locate(orb.Point{100.5, 0.5}); !ok || i != 0 {
		t.Errorf("(100.5, 0.5) located in %d %v", i, ok)
	}
	// The Point feature's own position lies outside the polygon.
	if _, ok := u.Locate(orb.Point{102, 0.5}); ok {
		t.Error("(102, 0.5) located")
	}
	if u.Outside() != 1 {
		t.Errorf("Outside = %d", u.Outside())
	}
	if got, want := u.Area(0), sphereRect(100, 0, 101, 1); math.Abs(got-want) > 1e-6*want {
		t.Errorf("area %.0f m², spherical rectangle %.0f m²", got, want)
	}
	if c := u.Centroid(0); math.Abs(c[0]-100.5) > 1e-12 || math.Abs(c[1]-0.5) > 1e-12 {
		t.Errorf("centroid %v", c)
	}
}

// Source: RFC 7946 Appendix A.3 (Polygon with a hole) and A.6 (MultiPolygon,
// the second member with a hole), coordinates copied from memory into
// testdata/rfc7946_appendix_a.geojson with ids "A.3" and "A.6". The two
// overlap on 100–101 E, 0–1 N, so there the first in file order wins.
func TestUnitsRFC7946Holes(t *testing.T) {
	u, err := Parse("testdata/rfc7946_appendix_a.geojson", Options{})
	if err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		p    orb.Point
		want string // "" for outside
	}{
		{orb.Point{100.1, 0.1}, "A.3"},
		{orb.Point{100.5, 0.5}, ""}, // in both holes
		{orb.Point{102.5, 2.5}, "A.6"},
		{orb.Point{101.5, 1.5}, ""},
		{orb.Point{100, 0}, "A.3"},   // a vertex: boundary counts as inside (orb/planar)
		{orb.Point{103, 2.5}, "A.6"}, // on an edge
	}
	for _, c := range cases {
		i, ok := u.Locate(c.p)
		got := ""
		if ok {
			got = u.ID(i)
		}
		if got != c.want {
			t.Errorf("Locate(%v) = %q, want %q", c.p, got, c.want)
		}
	}
	hole := sphereRect(100.2, 0.2, 100.8, 0.8)
	if got, want := u.Area(0), sphereRect(100, 0, 101, 1)-hole; math.Abs(got-want) > 1e-6*want {
		t.Errorf("A.3 area %.0f m², want %.0f", got, want)
	}
	if got, want := u.Area(1), sphereRect(102, 2, 103, 3)+sphereRect(100, 0, 101, 1)-hole; math.Abs(got-want) > 1e-6*want {
		t.Errorf("A.6 area %.0f m², want %.0f", got, want)
	}
	if b := u.Bound(1); b != (orb.Bound{Min: orb.Point{100, 0}, Max: orb.Point{103, 3}}) {
		t.Errorf("A.6 bound %v", b)
	}
	if i, ok := u.Index("A.6"); !ok || i != 1 {
		t.Errorf("Index(A.6) = %d %v", i, ok)
	}
}

// gj wraps features into a FeatureCollection.
func gj(features ...string) []byte {
	return []byte(`{"type":"FeatureCollection","features":[` + strings.Join(features, ",") + `]}`)
}

// poly is a Polygon feature with the given properties JSON and rings JSON.
func poly(props, rings string) string {
	return `{"type":"Feature","properties":` + props + `,"geometry":{"type":"Polygon","coordinates":` + rings + `}}`
}

const square = `[[[0,0],[1,0],[1,1],[0,1],[0,0]]]`

func TestUnitsBadGeoJSON(t *testing.T) {
	cases := []struct {
		name    string
		data    []byte
		feature int    // −1: the file as a whole
		text    string // part of the message
	}{
		{"syntax", []byte(`{"type":"FeatureCollection","features":[}`), -1, "byte offset 41"},
		{"not a collection", []byte(`{"type":"Feature"}`), -1, "want FeatureCollection"},
		{"no polygons", gj(`{"type":"Feature","properties":{"id":"a"},"geometry":{"type":"Point","coordinates":[0,0]}}`), -1, "no Polygon"},
		{"empty", gj(), -1, "no Polygon"},
		{"bad geometry", gj(poly(`{"id":"a"}`, square), `{"type":"Feature","properties":{"id":"b"},"geometry":{"type":"Polygon","coordinates":"x"}}`), 1, ""},
		{"missing id", gj(poly(`{"id":"a"}`, square), poly(`{"name":"b"}`, square)), 1, `no "id" property`},
		{"object id", gj(poly(`{"id":{"k":1}}`, square)), 0, "want a string or an integer"},
		{"fractional id", gj(poly(`{"id":1.5}`, square)), 0, "not an integer"},
		{"duplicate id", gj(poly(`{"id":"a"}`, square), poly(`{"id":"b"}`, square), poly(`{"id":"a"}`, square)), 2, `duplicate unit id "a" (also feature 0)`},
		{"duplicate numeric id", gj(poly(`{"id":7}`, square), poly(`{"id":"7"}`, square)), 1, "duplicate"},
		{"bow tie", gj(poly(`{"id":"a"}`, square), poly(`{"id":"b"}`, `[[[0,0],[1,1],[1,0],[0,1],[0,0]]]`)), 1, "intersects itself near (0.5, 0.5)"},
		{"unclosed", gj(poly(`{"id":"a"}`, `[[[0,0],[1,0],[1,1],[0,1]]]`)), 0, "not closed"},
		{"too few positions", gj(poly(`{"id":"a"}`, `[[[0,0],[1,0],[0,0]]]`)), 0, "need at least 4"},
		{"collinear ring", gj(poly(`{"id":"a"}`, `[[[0,0],[1,0],[2,0],[0,0]]]`)), 0, "intersects itself"},
		{"repeated positions only", gj(poly(`{"id":"a"}`, `[[[0,0],[1,0],[1,0],[0,0]]]`)), 0, "fewer than 3 distinct"},
		{"spike", gj(poly(`{"id":"a"}`, `[[[0,0],[2,0],[1,0],[1,1],[0,1],[0,0]]]`)), 0, "intersects itself"},
		{"figure eight at a vertex", gj(poly(`{"id":"a"}`, `[[[0,0],[1,1],[2,0],[2,2],[1,1],[0,2],[0,0]]]`)), 0, "intersects itself"},
		{"hole crosses shell", gj(poly(`{"id":"a"}`, `[[[0,0],[4,0],[4,4],[0,4],[0,0]],[[3,1],[5,1],[5,2],[3,2],[3,1]]]`)), 0, "rings 0 and 1 cross"},
		{"hole shares shell edge", gj(poly(`{"id":"a"}`, `[[[0,0],[4,0],[4,4],[0,4],[0,0]],[[1,0],[2,0],[2,1],[1,1],[1,0]]]`)), 0, "cross"},
		{"second polygon of a multipolygon", gj(`{"type":"Feature","properties":{"id":"m"},"geometry":{"type":"MultiPolygon","coordinates":[` + square + `,[[[5,5],[6,6],[6,5],[5,6],[5,5]]]]}}`), 0, "polygon 1 ring 0 intersects itself"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := FromGeoJSON("units.geojson", c.data, Options{})
			var ue *FileError
			if !errors.As(err, &ue) || !errors.Is(err, ErrUnits) {
				t.Fatalf("got %v, want a FileError", err)
			}
			if ue.Feature != c.feature || ue.File != "units.geojson" {
				t.Errorf("error names feature %d of %s, want %d: %v", ue.Feature, ue.File, c.feature, err)
			}
			if want := fmt.Sprintf("units.geojson: feature %d:", c.feature); c.feature >= 0 && !strings.HasPrefix(err.Error(), want) {
				t.Errorf("message %q lacks %q", err, want)
			}
			if !strings.Contains(err.Error(), c.text) {
				t.Errorf("message %q lacks %q", err, c.text)
			}
		})
	}
}

// Valid shapes that a careless validity check would reject (OGC Simple
// Features: holes may touch the shell at a single point; repeated
// consecutive positions are allowed).
func TestUnitsValidEdgeCases(t *testing.T) {
	cases := []struct{ name, rings string }{
		{"hole touching shell at a point", `[[[0,0],[4,0],[4,4],[0,4],[0,0]],[[2,0],[3,1],[1,1],[2,0]]]`},
		{"repeated position", `[[[0,0],[1,0],[1,0],[1,1],[0,1],[0,0]]]`},
		{"triangle", `[[[0,0],[1,0],[0,1],[0,0]]]`},
		{"concave", `[[[0,0],[4,0],[4,4],[2,1],[0,4],[0,0]]]`},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			u, err := FromGeoJSON("ok.geojson", gj(poly(`{"id":3}`, c.rings)), Options{})
			if err != nil {
				t.Fatal(err)
			}
			if u.ID(0) != "3" {
				t.Errorf("id %q", u.ID(0))
			}
		})
	}
}

// cellUnits builds an nx×ny grid of square cells over [0, nx]×[0, ny], each
// side split into k edges so that the polygons have 4k vertices. Synthetic
// geometry for the index check and the benchmark, not a reference value.
func cellUnits(tb testing.TB, nx, ny, k int) *Units {
	tb.Helper()
	var feats []string
	for y := range ny {
		for x := range nx {
			var ring []string
			add := func(px, py float64) { ring = append(ring, fmt.Sprintf("[%g,%g]", px, py)) }
			x0, y0 := float64(x), float64(y)
			for i := range k {
				add(x0+float64(i)/float64(k), y0)
			}
			for i := range k {
				add(x0+1, y0+float64(i)/float64(k))
			}
			for i := range k {
				add(x0+1-float64(i)/float64(k), y0+1)
			}
			for i := range k {
				add(x0, y0+1-float64(i)/float64(k))
			}
			add(x0, y0)
			feats = append(feats, poly(fmt.Sprintf(`{"cell":"c%d_%d"}`, x, y), "[["+strings.Join(ring, ",")+"]]"))
		}
	}
	u, err := FromGeoJSON("cells.geojson", gj(feats...), Options{IDProperty: "cell"})
	if err != nil {
		tb.Fatal(err)
	}
	return u
}

// The grid index must give what a linear scan with orb/planar's
// MultiPolygonContains gives (reference library: github.com/paulmach/orb
// v0.14.0), first match in file order.
func TestUnitsLocateMatchesLinearScan(t *testing.T) {
	u := cellUnits(t, 23, 17, 3)
	rng := rand.New(rand.NewPCG(1, 2))
	for range 5000 {
		p := orb.Point{rng.Float64()*25 - 1, rng.Float64()*19 - 1}
		if rng.IntN(10) == 0 { // exactly on a grid line
			p[0] = math.Round(p[0])
		}
		want, wantOK := -1, false
		for i := range u.Len() {
			if planar.MultiPolygonContains(u.Geometry(i).(orb.MultiPolygon), p) {
				want, wantOK = i, true
				break
			}
		}
		got, ok := u.Locate(p)
		if ok != wantOK || (ok && got != want) {
			t.Fatalf("Locate(%v) = %d %v, linear scan %d %v", p, got, ok, want, wantOK)
		}
	}
}

func BenchmarkUnitsLocate(b *testing.B) {
	u := cellUnits(b, 50, 40, 8) // 2,000 units of 32 vertices
	rng := rand.New(rand.NewPCG(3, 4))
	pts := make([]orb.Point, 4096)
	for i := range pts {
		pts[i] = orb.Point{rng.Float64() * 50, rng.Float64() * 40}
	}
	b.ReportAllocs()
	n := 0
	for b.Loop() {
		for _, p := range pts {
			if _, ok := u.Locate(p); ok {
				n++
			}
		}
	}
	if n == 0 {
		b.Fatal("no point located")
	}
	b.ReportMetric(float64(len(pts))*float64(b.N)/b.Elapsed().Seconds(), "points/s")
}
