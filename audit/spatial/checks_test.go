package spatial

import (
	"errors"
	"math"
	"os"
	"strings"
	"testing"

	"github.com/paulmach/orb"
)

// delawareBound is the bounding box osmium-tool 1.15.0 reports for the osm
// module's delaware-latest.osm.pbf (`osmium fileinfo -e`): the store's area
// in the checks below.
var delawareBound = orb.Bound{Min: orb.Point{-75.8997411, 38.0273717}, Max: orb.Point{-74.4929376, 39.887637}}

// TestUnitFileChecks feeds unit files that are not longitude/latitude
// GeoJSON, or do not fit the store, and checks the message says what is
// wrong and how to fix it.
func TestUnitFileChecks(t *testing.T) {
	// Dover's town hall at about 39.158 N, 75.524 W (from memory); a
	// 0.01-degree square around it, in the right and in swapped order.
	dover := `[[[-75.53,39.15],[-75.52,39.15],[-75.52,39.16],[-75.53,39.16],[-75.53,39.15]]]`
	swapped := `[[[39.15,-75.53],[39.16,-75.53],[39.16,-75.52],[39.15,-75.52],[39.15,-75.53]]]`
	// The same square in EPSG:3857 metres: x = R·λ, y = R·ln tan(π/4 + φ/2)
	// with R = 6378137 (EPSG Guidance Note 7-2, Popular Visualisation
	// Pseudo-Mercator), rounded to the metre.
	merc := `[[[-8407447,4744166],[-8406334,4744166],[-8406334,4745602],[-8407447,4745602],[-8407447,4744166]]]`
	for _, tc := range []struct {
		name  string
		data  []byte
		bound orb.Bound
		want  []string // substrings of the error; none for success
		warn  string   // substring of a warning
	}{
		{"geopackage", []byte("SQLite format 3\x00\x10\x00\x01\x01"), orb.Bound{}, []string{"SQLite database (a GeoPackage", "ogr2ogr -f GeoJSON"}, ""},
		{"zipped shapefile", []byte("PK\x03\x04\x14\x00"), orb.Bound{}, []string{"ZIP archive"}, ""},
		{"kml", []byte(`<?xml version="1.0"?><kml/>`), orb.Bound{}, []string{"XML (KML"}, ""},
		{"csv", []byte("id,wkt\n1,POLYGON((0 0,1 0,1 1,0 0))\n"), orb.Bound{}, []string{"not JSON"}, ""},
		{"crs member EPSG:3857", []byte(`{"type":"FeatureCollection","crs":{"type":"name","properties":{"name":"urn:ogc:def:crs:EPSG::3857"}},"features":[` +
			poly(`{"id":"d"}`, merc) + `]}`), orb.Bound{}, []string{`"crs" is "urn:ogc:def:crs:EPSG::3857"`, "ogr2ogr -t_srs EPSG:4326 out.geojson units.geojson"}, ""},
		{"crs member CRS84 accepted", []byte(`{"type":"FeatureCollection","crs":{"type":"name","properties":{"name":"urn:ogc:def:crs:OGC:1.3:CRS84"}},"features":[` +
			poly(`{"id":"d"}`, dover) + `]}`), delawareBound, nil, ""},
		{"projected without crs", gj(poly(`{"id":"d"}`, merc)), orb.Bound{}, []string{"feature 0", "projected", "ogr2ogr -t_srs EPSG:4326"}, ""},
		{"swapped beyond range", gj(poly(`{"id":"w"}`, `[[[40,-120],[41,-120],[41,-121],[40,-120]]]`)), orb.Bound{}, []string{"latitude beyond ±90", "swapped"}, ""},
		{"swapped for the store", gj(poly(`{"id":"d"}`, swapped)), delawareBound, []string{"axes swapped", "latitude first"}, ""},
		{"all outside the store", gj(poly(`{"id":"far"}`, `[[[10,50],[11,50],[11,51],[10,50]]]`)), delawareBound, []string{"no unit meets the store's area"}, ""},
		{"one outside the store", gj(poly(`{"id":"d"}`, dover), poly(`{"id":"far"}`, `[[[10,50],[11,50],[11,51],[10,50]]]`)), delawareBound, nil,
			"1 of 2 units lie wholly outside the store's area and will count nothing: far"},
		{"overlap refused for a store", gj(poly(`{"id":"a"}`, square), poly(`{"id":"b"}`, `[[[0.5,0],[1.5,0],[1.5,1],[0.5,1],[0.5,0]]]`)),
			orb.Bound{Min: orb.Point{0, 0}, Max: orb.Point{2, 2}}, []string{"a and b share 50% of the smaller"}, ""},
		{"overlap reported without a store", gj(poly(`{"id":"a"}`, square), poly(`{"id":"b"}`, `[[[0.5,0],[1.5,0],[1.5,1],[0.5,1],[0.5,0]]]`)),
			orb.Bound{}, nil, "a and b share 50%"},
		{"shared edge accepted", gj(poly(`{"id":"a"}`, square), poly(`{"id":"b"}`, `[[[1,0],[2,0],[2,1],[1,1],[1,0]]]`)),
			orb.Bound{Min: orb.Point{0, 0}, Max: orb.Point{2, 2}}, nil, ""},
	} {
		t.Run(tc.name, func(t *testing.T) {
			u, err := FromGeoJSON("units.geojson", tc.data, Options{Bound: tc.bound})
			if len(tc.want) == 0 {
				if err != nil {
					t.Fatal(err)
				}
				ws := strings.Join(u.Warnings(), "\n")
				if (tc.warn == "") != (ws == "") || !strings.Contains(ws, tc.warn) {
					t.Fatalf("warnings %q, want %q", ws, tc.warn)
				}
				return
			}
			var fe *FileError
			if !errors.As(err, &fe) || !errors.Is(err, ErrUnits) || !strings.HasPrefix(err.Error(), "units.geojson: ") {
				t.Fatalf("got %v, want a FileError", err)
			}
			for _, w := range tc.want {
				if !strings.Contains(err.Error(), w) {
					t.Errorf("error %q lacks %q", err, w)
				}
			}
			if strings.Contains(err.Error(), "JSON syntax error") {
				t.Errorf("error %q speaks of JSON syntax", err)
			}
		})
	}
}

// TestOverlapShares checks the sampled overlap share against plane
// geometry: squares offset by half a side share half of each; the RFC 7946
// appendix A.6 MultiPolygon's second polygon is the A.3 polygon with its
// hole (same coordinates), so A.3 lies wholly inside A.6.
func TestOverlapShares(t *testing.T) {
	data, err := os.ReadFile("testdata/rfc7946_appendix_a.geojson")
	if err != nil {
		t.Fatal(err)
	}
	for _, tc := range []struct {
		name string
		data []byte
		want float64
	}{
		{"half", gj(poly(`{"id":"a"}`, square), poly(`{"id":"b"}`, `[[[0.5,0],[1.5,0],[1.5,1],[0.5,1],[0.5,0]]]`)), 0.5},
		{"quarter corner", gj(poly(`{"id":"a"}`, square), poly(`{"id":"b"}`, `[[[0.5,0.5],[1.5,0.5],[1.5,1.5],[0.5,1.5],[0.5,0.5]]]`)), 0.25},
		{"rfc 7946 A.3 in A.6", data, 1},
	} {
		t.Run(tc.name, func(t *testing.T) {
			u, err := FromGeoJSON("u.geojson", tc.data, Options{})
			if err != nil {
				t.Fatal(err)
			}
			ov := u.Overlaps(0.01)
			// The 48×48 sample grid resolves the share to about 1/48.
			if len(ov) != 1 || math.Abs(ov[0].Share-tc.want) > 1.0/48 {
				t.Fatalf("overlaps %+v, want one of share %g", ov, tc.want)
			}
		})
	}
}

// TestAdminUnitsDoNotOverlap: the Delaware towns and counties of the real
// fixture tile the ground without overlaps above the default tolerance.
func TestAdminUnitsDoNotOverlap(t *testing.T) {
	st := delawareStore(t)
	for _, spec := range []string{"admin:8", "admin:6,name=[KNS]*"} {
		t.Run(spec, func(t *testing.T) {
			u, err := Build(t.Context(), spec, Options{Store: st})
			if err != nil {
				t.Fatal(err)
			}
			if ov := u.Overlaps(DefaultOverlapTolerance); len(ov) != 0 {
				t.Fatalf("overlaps %+v", ov)
			}
		})
	}
}
