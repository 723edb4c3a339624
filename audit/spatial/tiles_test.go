package spatial

import (
	"fmt"
	"math"
	"strconv"
	"testing"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/maptile"
)

// Tile numbers worked by hand from the OSM slippy-map tile-naming formulas
// (x = floor((lon+180)/360·2^z), y = floor((1 − ln(tan φ + sec φ)/π)/2·2^z)),
// intermediate values from a calculator:
//
//	(13.405, 52.52) z10: x = 193.405/360·1024 = 550.13 → 550;
//	   tan φ = 1.304168, sec φ = 1.643427, ln(sum) = 1.080990,
//	   (1 − 1.080990/π)/2·1024 = 335.83 → 335
//	(−70, −33) z8: x = 110/360·256 = 78.22 → 78;
//	   tan φ = −0.649408, sec φ = 1.192363, ln(sum) = −0.610728,
//	   (1 + 0.610728/π)/2·256 = 152.88 → 152
//	(0, 0) z1: x = 180/360·2 = 1; ln(0 + 1) = 0, y = 1/2·2 = 1
//	(139.6917, 35.6895) z15: x = 29099.05 → 29099; ln(0.718295 + 1.231238) = 0.667590,
//	   y = 12902.39 → 12902
//	(−122.4194, 37.7749) z12: x = 655.14 → 655; ln(0.774978 + 1.265145) = 0.713010,
//	   y = 1583.19 → 1583
func TestTileAtWorkedExamples(t *testing.T) {
	cases := []struct {
		lon, lat float64
		z        int
		want     string
	}{
		{13.405, 52.52, 10, "10/550/335"},
		{-70, -33, 8, "8/78/152"},
		{0, 0, 1, "1/1/1"},
		{139.6917, 35.6895, 15, "15/29099/12902"},
		{-122.4194, 37.7749, 12, "12/655/1583"},
		{45, 60, 0, "0/0/0"},
		// Edges (common practice of tile servers): longitude 180 is the last
		// column, the Mercator limit is the last row.
		{180, 0, 2, "2/3/2"},
		{-180, maxMercatorLat, 3, "3/0/0"},
		{0, -maxMercatorLat, 3, "3/4/7"},
	}
	for _, c := range cases {
		t.Run(c.want, func(t *testing.T) {
			tile, ok := TileAt(orb.Point{c.lon, c.lat}, c.z)
			if !ok || tile.String() != c.want {
				t.Errorf("TileAt(%v, %v, %d) = %v %v, want %s", c.lon, c.lat, c.z, tile, ok, c.want)
			}
		})
	}
	for _, p := range []orb.Point{{0, 85.06}, {0, -86}, {180.5, 0}, {math.NaN(), 0}} {
		if tile, ok := TileAt(p, 5); ok {
			t.Errorf("TileAt(%v) = %v, want outside the Web Mercator square", p, tile)
		}
	}
	if _, ok := TileAt(orb.Point{0, 0}, MaxTileZoom+1); ok {
		t.Error("zoom above MaxTileZoom accepted")
	}
}

// Second reference: github.com/paulmach/orb/maptile v0.14.0 (At and
// Tile.Bound) on a lattice of points at several zooms, avoiding exact tile
// edges where the two may round differently.
func TestTileAtAgainstMaptile(t *testing.T) {
	for _, z := range []int{0, 1, 4, 9, 13, 17, 22} {
		for lon := -179.37; lon < 180; lon += 7.31 {
			for lat := -84.9; lat < 85; lat += 3.77 {
				p := orb.Point{lon, lat}
				got, ok := TileAt(p, z)
				if !ok {
					t.Fatalf("TileAt(%v, %d) not ok", p, z)
				}
				want := maptile.At(p, maptile.Zoom(z))
				if got.X != want.X || got.Y != want.Y {
					t.Fatalf("TileAt(%v, %d) = %v, maptile.At = %d/%d/%d", p, z, got, want.Z, want.X, want.Y)
				}
				gb, wb := got.Bound(), want.Bound()
				for k := range 2 {
					if math.Abs(gb.Min[k]-wb.Min[k]) > 1e-9 || math.Abs(gb.Max[k]-wb.Max[k]) > 1e-9 {
						t.Fatalf("%v bound %v, maptile %v", got, gb, wb)
					}
				}
				if !gb.Contains(p) {
					t.Fatalf("%v bound %v does not hold %v", got, gb, p)
				}
			}
		}
	}
}

func TestTileUnits(t *testing.T) {
	// Study area 13.0–14.0 E, 52.0–53.0 N at z10, worked by hand: columns
	// floor(193/360·1024) = floor(548.98) = 548 to floor(194/360·1024) =
	// floor(551.82) = 551; rows from the north edge, 53°: tan 1.327045, sec
	// 1.661640, ln 1.094833, y = 333.57 → 333, to 52°: tan 1.279942, sec
	// 1.624269, ln 1.066162, y = 338.24 → 338. So 4 × 6 tiles.
	area := orb.Bound{Min: orb.Point{13, 52}, Max: orb.Point{14, 53}}
	u, err := Parse("tiles:10", Options{Bound: area})
	if err != nil {
		t.Fatal(err)
	}
	lo, _ := TileAt(orb.Point{13, 53}, 10)
	hi, _ := TileAt(orb.Point{14, 52}, 10)
	if lo.String() != "10/548/333" || hi.String() != "10/551/338" {
		t.Fatalf("corners %v %v", lo, hi)
	}
	if u.Len() != 4*6 {
		t.Fatalf("Len = %d, want 24", u.Len())
	}
	i, ok := u.Locate(orb.Point{13.405, 52.52})
	if !ok || u.ID(i) != "10/550/335" {
		t.Fatalf("Locate = %d %v (%s)", i, ok, u.ID(i))
	}
	if j, ok := u.Index("10/550/335"); !ok || j != i {
		t.Errorf("Index = %d %v, want %d", j, ok, i)
	}
	for _, bad := range []string{"10/547/335", "11/550/335", "10/550/335x", "x"} {
		if _, ok := u.Index(bad); ok {
			t.Errorf("Index(%q) found", bad)
		}
	}
	for k := range u.Len() {
		if j, ok := u.Index(u.ID(k)); !ok || j != k {
			t.Fatalf("Index(ID(%d)) = %d %v", k, j, ok)
		}
		if j, ok := u.Locate(u.Centroid(k)); !ok || j != k {
			t.Fatalf("unit %d: centroid located in %d %v", k, j, ok)
		}
	}
	if _, ok := u.Locate(orb.Point{20, 52.5}); ok {
		t.Error("point outside the study area located")
	}
	if _, ok := u.Locate(orb.Point{0, 89}); ok {
		t.Error("polar point located")
	}
	if u.Outside() != 2 {
		t.Errorf("Outside = %d, want 2", u.Outside())
	}
	// Area of a tile: the area of a longitude/latitude rectangle on a sphere,
	// R²·Δλ·(sin φ2 − sin φ1) (standard spherical geometry, e.g. Snyder 1987,
	// "Map Projections – A Working Manual", USGS PP 1395), R = 6378137 m.
	b := u.Bound(i)
	const r = 6378137.0
	want := r * r * (b.Max[0] - b.Min[0]) * math.Pi / 180 * (math.Sin(b.Max[1]*math.Pi/180) - math.Sin(b.Min[1]*math.Pi/180))
	if got := u.Area(i); math.Abs(got-want) > 1e-6*want {
		t.Errorf("tile area %.1f m², spherical rectangle %.1f m²", got, want)
	}
}

func TestTileUnitsBadSpec(t *testing.T) {
	area := orb.Bound{Min: orb.Point{13, 52}, Max: orb.Point{14, 53}}
	cases := []struct {
		spec string
		opts Options
	}{
		{"tiles:", Options{Bound: area}},
		{"tiles:x", Options{Bound: area}},
		{"tiles:-1", Options{Bound: area}},
		{"tiles:" + strconv.Itoa(MaxTileZoom+1), Options{Bound: area}},
		{"tiles:10", Options{}},
		{"tiles:18", Options{Bound: area, MaxTiles: 1000}},
		{"", Options{}},
		{"testdata/no-such-file.geojson", Options{}},
	}
	for _, c := range cases {
		t.Run(c.spec, func(t *testing.T) {
			if _, err := Parse(c.spec, c.opts); err == nil {
				t.Errorf("Parse(%q) succeeded", c.spec)
			} else {
				t.Log(err)
			}
		})
	}
}

func ExampleTileAt() {
	t, ok := TileAt(orb.Point{13.405, 52.52}, 10)
	fmt.Println(t, ok)
	// Output: 10/550/335 true
}
