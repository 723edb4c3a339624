package osmfile

import (
	"fmt"
	"math"
	"strconv"

	"github.com/paulmach/osm"
)

// Valid coordinates in degrees (WGS 84, as the OSM API stores them).
const (
	maxLat = 90
	maxLon = 180
)

// checkLocation requires a visible node to have a latitude in [-90, 90] and
// a longitude in [-180, 180]. The readers mark a visible node without a
// location with NaN coordinates. A deleted node version has no location: any
// it carries is kept when valid and otherwise replaced by 0,0 (see deletedNode).
func checkLocation(n *osm.Node) error {
	if !n.Visible {
		if !inRange(n.Lat, maxLat) || !inRange(n.Lon, maxLon) {
			n.Lat, n.Lon = 0, 0
		}
		return nil
	}
	if math.IsNaN(n.Lat) || math.IsNaN(n.Lon) {
		return fmt.Errorf("%w: visible node without a location (lat and lon are required unless visible is false)", ErrFormat)
	}
	if !inRange(n.Lat, maxLat) {
		return fmt.Errorf("%w: latitude %s outside [-90, 90]", ErrFormat, degrees(n.Lat))
	}
	if !inRange(n.Lon, maxLon) {
		return fmt.Errorf("%w: longitude %s outside [-180, 180]", ErrFormat, degrees(n.Lon))
	}
	return nil
}

// degrees formats v rounded to the API's 7 decimals, shortest form.
func degrees(v float64) string {
	return strconv.FormatFloat(math.Round(v*1e7)/1e7, 'f', -1, 64)
}

// inRange reports whether v is in [-limit, limit]; NaN is not.
func inRange(v, limit float64) bool {
	return v >= -limit && v <= limit
}

// checkChangesetBounds requires a changeset's bounding box, when it has one,
// to lie within [-90, 90] x [-180, 180].
func checkChangesetBounds(c *osm.Changeset) error {
	for _, b := range []struct {
		name  string
		v     float64
		limit float64
	}{{"min_lat", c.MinLat, maxLat}, {"max_lat", c.MaxLat, maxLat}, {"min_lon", c.MinLon, maxLon}, {"max_lon", c.MaxLon, maxLon}} {
		if !inRange(b.v, b.limit) {
			return fmt.Errorf("%w: %s %s outside [%v, %v]", ErrFormat, b.name, degrees(b.v), -b.limit, b.limit)
		}
	}
	return nil
}
