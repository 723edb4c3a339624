package spatial

import (
	"errors"
	"os"
	"testing"

	"github.com/paulmach/orb"
)

// FuzzFromGeoJSON feeds arbitrary bytes to FromGeoJSON: units or a
// *FileError naming the file, never a panic. Units that come back answer
// every accessor and Locate. Seeds: the RFC 7946 fixtures and small
// hand-made files (a hole, a bow-tie, a projected CRS).
func FuzzFromGeoJSON(f *testing.F) {
	for _, file := range []string{"testdata/rfc7946_example.geojson", "testdata/rfc7946_appendix_a.geojson"} {
		data, err := os.ReadFile(file)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Add(gj(poly(`{"id":"a"}`, `[[[0,0],[1,0],[1,1],[0,1],[0,0]]]`), poly(`{"id":"b"}`, `[[[0.5,0],[2,0],[2,1],[0.5,0]]]`)))
	f.Add(gj(poly(`{"id":"bow"}`, `[[[0,0],[1,1],[1,0],[0,1],[0,0]]]`)))
	f.Add([]byte(`{"type":"FeatureCollection","crs":{"type":"name","properties":{"name":"urn:ogc:def:crs:EPSG::3857"}},"features":[` +
		poly(`{"id":1}`, `[[[1000000,6000000],[1100000,6000000],[1100000,6100000],[1000000,6000000]]]`) + `]}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		u, err := FromGeoJSON("fuzz.geojson", data, Options{Bound: orb.Bound{Min: orb.Point{-1, -1}, Max: orb.Point{3, 3}}})
		if err != nil {
			var fe *FileError
			if !errors.As(err, &fe) || fe.File != "fuzz.geojson" || !errors.Is(err, ErrUnits) {
				t.Fatalf("error %q is not a *FileError naming the file", err)
			}
			return
		}
		for i := range u.Len() {
			_ = u.ID(i)
			_ = u.Name(i)
			_ = u.Area(i)
			_ = u.Centroid(i)
			if j, ok := u.Locate(u.Bound(i).Center()); ok && (j < 0 || j >= u.Len()) {
				t.Fatalf("Locate gave unit %d of %d", j, u.Len())
			}
		}
	})
}
