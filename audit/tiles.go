package audit

import (
	"fmt"
	"math"

	"github.com/paulmach/orb"
)

// MaxTileZoom is the largest zoom tiles:Z accepts; at 22 a tile edge is
// about 10 m at the equator, finer than any useful aggregation unit.
const MaxTileZoom = 22

// maxMercatorLat is the latitude where the square Web Mercator world ends,
// atan(sinh(π)) in degrees; points beyond it fall in no tile.
const maxMercatorLat = 85.0511287798066

// Tile is a slippy-map tile: zoom Z, column X counted east from 180° W, row Y
// counted south from the top of the Web Mercator square. Its unit id is
// "Z/X/Y", the tile-naming used by OSM tile servers.
type Tile struct {
	Z    int
	X, Y uint32
}

// String returns "Z/X/Y".
func (t Tile) String() string { return fmt.Sprintf("%d/%d/%d", t.Z, t.X, t.Y) }

// TileAt returns the tile of zoom z holding the point p (longitude, latitude
// in degrees), by the OSM slippy-map tile-naming formulas:
//
//	n = 2^z
//	x = floor((lon + 180)/360 · n)
//	y = floor((1 − ln(tan(lat) + sec(lat))/π)/2 · n)
//
// ok is false for a zoom outside [0, MaxTileZoom], a non-finite coordinate, a
// longitude outside [−180, 180] or a latitude beyond ±85.0511° (outside the
// Web Mercator square). Longitude 180 falls in the last column. A point on a
// tile edge belongs to the tile east or south of it.
func TileAt(p orb.Point, z int) (Tile, bool) {
	lon, lat := p[0], p[1]
	if z < 0 || z > MaxTileZoom || !(lon >= -180 && lon <= 180) || !(lat >= -maxMercatorLat && lat <= maxMercatorLat) {
		return Tile{}, false
	}
	n := float64(uint32(1) << z)
	x := math.Floor((lon + 180) / 360 * n)
	phi := lat * math.Pi / 180
	y := math.Floor((1 - math.Log(math.Tan(phi)+1/math.Cos(phi))/math.Pi) / 2 * n)
	x = math.Min(math.Max(x, 0), n-1)
	y = math.Min(math.Max(y, 0), n-1)
	return Tile{Z: z, X: uint32(x), Y: uint32(y)}, true
}

// tileLon is the longitude of the west edge of column x at zoom z.
func tileLon(x float64, z int) float64 {
	return x/float64(uint32(1)<<z)*360 - 180
}

// tileLat is the latitude of the north edge of row y at zoom z, the inverse
// formula lat = atan(sinh(π(1 − 2y/n))).
func tileLat(y float64, z int) float64 {
	n := float64(uint32(1) << z)
	return math.Atan(math.Sinh(math.Pi*(1-2*y/n))) * 180 / math.Pi
}

// Bound returns the tile's extent in degrees.
func (t Tile) Bound() orb.Bound {
	return orb.Bound{
		Min: orb.Point{tileLon(float64(t.X), t.Z), tileLat(float64(t.Y)+1, t.Z)},
		Max: orb.Point{tileLon(float64(t.X)+1, t.Z), tileLat(float64(t.Y), t.Z)},
	}
}
