package spatial

import (
	"bytes"
	"encoding/json"
	"fmt"
	"math"
	"sort"
	"strings"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/planar"
)

// reprojectHint is the fix for a unit file that is not in longitude/latitude.
const reprojectHint = "reproject it to longitude/latitude: ogr2ogr -t_srs EPSG:4326 out.geojson %s"

// DefaultOverlapTolerance is the overlap share two units may have before
// FromGeoJSON refuses them (Options.OverlapTolerance).
const DefaultOverlapTolerance = 0.01

// sniffFormat names the format of a unit file that is not JSON, from its
// first bytes; empty when it may be JSON.
func sniffFormat(data []byte) string {
	data = bytes.TrimPrefix(data, []byte("\xef\xbb\xbf"))
	trimmed := bytes.TrimLeft(data, " \t\r\n")
	switch {
	case bytes.HasPrefix(data, []byte("SQLite format 3\x00")):
		return "a SQLite database (a GeoPackage or SpatiaLite file)"
	case bytes.HasPrefix(data, []byte("PK\x03\x04")):
		return "a ZIP archive (a zipped shapefile, KMZ or similar)"
	case bytes.HasPrefix(data, []byte{0x00, 0x00, 0x27, 0x0a}):
		return "an ESRI shapefile (.shp)"
	case bytes.HasPrefix(trimmed, []byte("<")):
		return "XML (KML, GML or OSM XML)"
	case len(trimmed) == 0:
		return "empty"
	case trimmed[0] != '{':
		return "not JSON (a GeoJSON file starts with '{')"
	}
	return ""
}

// checkCRS refuses a "crs" member (GeoJSON 2008; RFC 7946 dropped it)
// naming anything but WGS 84 longitude/latitude.
func checkCRS(name string, raw json.RawMessage) error {
	if len(raw) == 0 || string(raw) == "null" {
		return nil
	}
	var crs struct {
		Properties struct {
			Name string `json:"name"`
		} `json:"properties"`
	}
	if err := json.Unmarshal(raw, &crs); err != nil {
		return fmt.Errorf("unreadable \"crs\" member: %w", err)
	}
	n := strings.ToUpper(crs.Properties.Name)
	for _, ok := range []string{"CRS84", "EPSG::4326", "EPSG:4326"} {
		if strings.HasSuffix(n, ok) {
			return nil
		}
	}
	return fmt.Errorf("the file's \"crs\" is %q, not longitude/latitude on WGS 84 (RFC 7946 section 4); "+reprojectHint,
		crs.Properties.Name, name)
}

// checkRange refuses coordinates outside longitude ±180, latitude ±90,
// the sign of a projected file (EPSG:3857 and national grids use metres).
func checkRange(name string, mp orb.MultiPolygon) error {
	for _, p := range mp {
		for _, r := range p {
			for _, pt := range r {
				if math.Abs(pt[0]) > 180 || math.Abs(pt[1]) > 90 {
					if math.Abs(pt[0]) <= 90 && math.Abs(pt[1]) <= 180 {
						return fmt.Errorf("coordinate (%g, %g) has a latitude beyond ±90: are longitude and latitude swapped? "+
							"GeoJSON gives longitude first (RFC 7946 section 3.1.1)", pt[0], pt[1])
					}
					return fmt.Errorf("coordinate (%g, %g) is outside longitude ±180 / latitude ±90, so the file is in a projected "+
						"coordinate system (metres?); "+reprojectHint, pt[0], pt[1], name)
				}
			}
		}
	}
	return nil
}

func swapBound(b orb.Bound) orb.Bound {
	return orb.Bound{Min: orb.Point{b.Min[1], b.Min[0]}, Max: orb.Point{b.Max[1], b.Max[0]}}
}

// checkArea compares the units with the store's area: an error when none
// meets it (with the hint of swapped axes when swapping would make them
// meet), a warning naming the units that miss it.
func (u *Units) checkArea(area orb.Bound) error {
	if area.IsZero() || area.IsEmpty() {
		return nil
	}
	ext := u.bounds[0]
	var miss []string
	for i, b := range u.bounds {
		ext = ext.Union(b)
		if !b.Intersects(area) {
			miss = append(miss, u.ids[i])
		}
	}
	if len(miss) == len(u.ids) {
		if swapBound(ext).Intersects(area) {
			return fmt.Errorf("the units (longitude %g..%g, latitude %g..%g) miss the store's area (longitude %g..%g, latitude %g..%g), "+
				"but would meet it with the axes swapped: the file gives latitude first; GeoJSON gives longitude first (RFC 7946 section 3.1.1)",
				ext.Min[0], ext.Max[0], ext.Min[1], ext.Max[1], area.Min[0], area.Max[0], area.Min[1], area.Max[1])
		}
		return fmt.Errorf("no unit meets the store's area (longitude %g..%g, latitude %g..%g); the units span longitude %g..%g, latitude %g..%g",
			area.Min[0], area.Max[0], area.Min[1], area.Max[1], ext.Min[0], ext.Max[0], ext.Min[1], ext.Max[1])
	}
	if len(miss) > 0 {
		u.warnings = append(u.warnings, fmt.Sprintf("%s: %d of %d units lie wholly outside the store's area and will count nothing: %s",
			u.source, len(miss), len(u.ids), short(miss)))
	}
	return nil
}

// Overlap is the overlap of two units: Share is the overlapping area over
// the smaller unit's area.
type Overlap struct {
	A, B  string
	Share float64
}

// overlapSamples is the side of the sample grid over each candidate pair's
// common bound; the share's resolution is about 1/overlapSamples of it.
const overlapSamples = 48

// Overlaps returns the pairs of polygon units whose overlap share is above
// tol, largest first. Candidate pairs are those whose bounds meet (a sweep
// over bounds sorted by west edge); for each, the overlap area is estimated
// by testing a 48×48 grid of cell centres over the pair's common bound
// against both polygons (orb/planar.MultiPolygonContains), so units that
// merely share an edge have a share near 0. Tiles never overlap.
func (u *Units) Overlaps(tol float64) []Overlap {
	if u.tiles {
		return nil
	}
	idx := make([]int, len(u.bounds))
	for i := range idx {
		idx[i] = i
	}
	sort.Slice(idx, func(a, b int) bool { return u.bounds[idx[a]].Min[0] < u.bounds[idx[b]].Min[0] })
	var out []Overlap
	for a, i := range idx {
		for _, j := range idx[a+1:] {
			if u.bounds[j].Min[0] > u.bounds[i].Max[0] {
				break
			}
			if !u.bounds[i].Intersects(u.bounds[j]) {
				continue
			}
			if s := u.overlapShare(i, j); s > tol {
				a, b := min(i, j), max(i, j)
				out = append(out, Overlap{A: u.ids[a], B: u.ids[b], Share: s})
			}
		}
	}
	sort.Slice(out, func(a, b int) bool { return out[a].Share > out[b].Share })
	return out
}

// overlapShare estimates the overlap of units i and j over the smaller
// planar area.
func (u *Units) overlapShare(i, j int) float64 {
	bi, bj := u.bounds[i], u.bounds[j]
	c := orb.Bound{Min: orb.Point{math.Max(bi.Min[0], bj.Min[0]), math.Max(bi.Min[1], bj.Min[1])},
		Max: orb.Point{math.Min(bi.Max[0], bj.Max[0]), math.Min(bi.Max[1], bj.Max[1])}}
	w, h := c.Max[0]-c.Min[0], c.Max[1]-c.Min[1]
	if w <= 0 || h <= 0 {
		return 0
	}
	both := 0
	for y := range overlapSamples {
		for x := range overlapSamples {
			p := orb.Point{c.Min[0] + (float64(x)+0.5)*w/overlapSamples, c.Min[1] + (float64(y)+0.5)*h/overlapSamples}
			if planar.MultiPolygonContains(u.polys[i], p) && planar.MultiPolygonContains(u.polys[j], p) {
				both++
			}
		}
	}
	area := float64(both) / (overlapSamples * overlapSamples) * w * h
	smaller := math.Min(math.Abs(planar.Area(u.polys[i])), math.Abs(planar.Area(u.polys[j])))
	if smaller == 0 {
		return 0
	}
	return math.Min(1, area/smaller)
}

// checkOverlaps refuses units that overlap by more than tol.
func (u *Units) checkOverlaps(tol float64) error {
	if tol < 0 {
		return nil
	}
	ov := u.Overlaps(tol)
	if len(ov) == 0 {
		return nil
	}
	var parts []string
	for _, o := range ov[:min(len(ov), 5)] {
		parts = append(parts, fmt.Sprintf("%s and %s share %.0f%% of the smaller", o.A, o.B, 100*o.Share))
	}
	more := ""
	if len(ov) > 5 {
		more = fmt.Sprintf(" and %d more pairs", len(ov)-5)
	}
	return fmt.Errorf("units overlap (an edit there would count in both): %s%s; units must not overlap by more than %.1f%% of the smaller",
		strings.Join(parts, "; "), more, 100*tol)
}
