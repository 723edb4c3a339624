package spatial

import (
	"fmt"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/maptile"
)

// MaxTileZoom is the largest zoom tiles:Z accepts; at 22 a tile edge is
// about 10 m at the equator, finer than any useful aggregation unit.
const MaxTileZoom = 22

// maxMercatorLat is the latitude where the square Web Mercator world ends,
// atan(sinh(π)) in degrees; points beyond it fall in no tile.
const maxMercatorLat = 85.0511287798066

// Tile is a slippy-map tile (github.com/paulmach/orb/maptile): zoom Z, column X
// counted east from 180° W, row Y counted south from the top of the Web
// Mercator square. Its unit id is "Z/X/Y", the tile-naming used by OSM tile
// servers.
type Tile struct{ maptile.Tile }

// String returns "Z/X/Y".
func (t Tile) String() string { return fmt.Sprintf("%d/%d/%d", t.Z, t.X, t.Y) }

// TileAt returns the tile of zoom z holding the point p (longitude, latitude
// in degrees), by the OSM slippy-map tile-naming formulas that maptile
// implements:
//
//	n = 2^z
//	x = floor((lon + 180)/360 · n)
//	y = floor((1 − ln(tan(lat) + sec(lat))/π)/2 · n)
//
// ok is false for a zoom outside [0, MaxTileZoom], a non-finite coordinate, a
// longitude outside [−180, 180] or a latitude beyond ±85.0511° (outside the
// Web Mercator square). Longitude 180 falls in the last column and the
// Mercator limit in the last row (maptile would give column or row n there).
// A point on a tile edge belongs to the tile east or south of it.
func TileAt(p orb.Point, z int) (Tile, bool) {
	lon, lat := p[0], p[1]
	if z < 0 || z > MaxTileZoom || !(lon >= -180 && lon <= 180) || !(lat >= -maxMercatorLat && lat <= maxMercatorLat) {
		return Tile{}, false
	}
	f := maptile.Fraction(p, maptile.Zoom(z))
	last := float64(uint32(1)<<z) - 1
	x := min(max(f[0], 0), last)
	y := min(max(f[1], 0), last)
	return Tile{maptile.New(uint32(x), uint32(y), maptile.Zoom(z))}, true
}
