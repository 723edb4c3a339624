package spatial

import (
	"cmp"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"os"
	"sort"
	"strconv"
	"strings"
	"sync/atomic"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geo"
	"github.com/paulmach/orb/geojson"
	"github.com/paulmach/orb/maptile"
	"github.com/paulmach/orb/planar"
)

// ErrUnits is returned (wrapped) for a unit specification or unit file that
// cannot be used.
var ErrUnits = errors.New("spatial: bad units")

// FileError is a problem with one feature of a unit file. Feature is the
// 0-based index in the "features" array (jq '.features[N]'); −1 when the
// problem is with the file as a whole.
type FileError struct {
	File    string
	Feature int
	Err     error
}

func (e *FileError) Error() string {
	if e.Feature < 0 {
		return fmt.Sprintf("%s: %v", e.File, e.Err)
	}
	return fmt.Sprintf("%s: feature %d: %v", e.File, e.Feature, e.Err)
}

// Unwrap returns the cause; errors.Is(err, ErrUnits) holds for every FileError.
func (e *FileError) Unwrap() []error { return []error{ErrUnits, e.Err} }

// Options tunes Parse.
type Options struct {
	// IDProperty is the GeoJSON property holding each unit's id (default
	// "id"). String and integer values are accepted. When the property is
	// absent and IDProperty is "id", the feature's own "id" member is used.
	IDProperty string
	// NameProperty is the GeoJSON property holding each unit's name
	// (default "name"), shown on maps and in tables; a unit without it, or
	// whose value is not a string, has no name.
	NameProperty string
	// Bound is the study area, required for tiles:Z: the units are the tiles
	// of zoom Z that meet it. For unit files it is the store's area, when
	// set: a file whose units all miss it is refused (with a hint when
	// swapping longitude and latitude would make them meet it), units that
	// miss it get a warning.
	Bound orb.Bound
	// OverlapTolerance is the largest overlap share (overlapping area over
	// the smaller unit's) two polygon units may have; 0 means
	// DefaultOverlapTolerance, a negative value turns the check off. Units
	// read for a store (Bound set, as the commands do) that overlap more are
	// refused; a file read on its own gets a warning (Warnings) instead.
	OverlapTolerance float64
	// MaxTiles caps the number of tiles tiles:Z may produce (default 1<<22),
	// so that a high zoom over a wide area fails early instead of exhausting
	// memory downstream.
	MaxTiles int
	// Store is the history store admin:LEVEL units are assembled from.
	Store VersionReader
	// At is the time admin:LEVEL boundaries are taken at (the start of the
	// study window); zero for the latest versions.
	At time.Time
}

// Units is a fixed set of spatial units: slippy-map tiles over a study area,
// or polygons from a GeoJSON file. Unit i has ID(i), Bound(i), Centroid(i),
// Area(i) and Geometry(i). Locate is safe for concurrent use; the other
// methods only read.
type Units struct {
	source string

	// Tiles: the column and row ranges at zoom.
	tiles      bool
	zoom       int
	minX, minY uint32
	nx, ny     uint32

	// Polygons.
	ids    []string
	names  []string
	byID   map[string]int
	polys  []orb.MultiPolygon
	bounds []orb.Bound
	grid   unitGrid

	warnings []string
	outside  atomic.Int64
}

// Parse builds units from spec: "tiles:Z" for the slippy-map tiles of
// zoom Z (0 to MaxTileZoom) that meet opts.Bound, or the path of a GeoJSON
// file of Polygon and MultiPolygon features (see FromGeoJSON).
func Parse(spec string, opts Options) (*Units, error) {
	return Build(context.Background(), spec, opts)
}

// Build is Parse with a context, and with "admin:LEVEL[,name=GLOB][,within=NAME]"
// as a third kind of specification: the administrative boundaries of
// opts.Store at opts.At (see AdminUnits and ParseAdminSpec).
func Build(ctx context.Context, spec string, opts Options) (*Units, error) {
	if a, ok, err := ParseAdminSpec(spec); ok {
		if err != nil {
			return nil, err
		}
		if opts.Store == nil {
			return nil, fmt.Errorf("%w: %q needs a history store", ErrUnits, spec)
		}
		u, err := AdminUnits(ctx, opts.Store, a, opts.At)
		if err != nil {
			return nil, err
		}
		if err := u.checkOverlaps(opts.overlapTolerance()); err != nil {
			return nil, fmt.Errorf("%w: %s: %w", ErrUnits, spec, err)
		}
		return u, nil
	}
	if z, ok := strings.CutPrefix(spec, "tiles:"); ok {
		return tileUnits(spec, z, opts)
	}
	if spec == "" {
		return nil, fmt.Errorf("%w: empty unit specification (want tiles:Z or a GeoJSON file)", ErrUnits)
	}
	data, err := os.ReadFile(spec)
	if err != nil {
		return nil, fmt.Errorf("%w: read unit file: %w", ErrUnits, err)
	}
	return FromGeoJSON(spec, data, opts)
}

func (o Options) overlapTolerance() float64 {
	if o.OverlapTolerance == 0 {
		return DefaultOverlapTolerance
	}
	return o.OverlapTolerance
}

func tileUnits(spec, zs string, opts Options) (*Units, error) {
	z, err := strconv.Atoi(zs)
	if err != nil || z < 0 || z > MaxTileZoom {
		return nil, fmt.Errorf("%w: %q: zoom must be an integer from 0 to %d", ErrUnits, spec, MaxTileZoom)
	}
	b := opts.Bound
	if b.IsZero() || b.IsEmpty() {
		return nil, fmt.Errorf("%w: %q needs the study area's bound", ErrUnits, spec)
	}
	// Clamp the study area into the Mercator square so that its corners
	// have tiles.
	clamp := func(p orb.Point) orb.Point {
		return orb.Point{math.Min(math.Max(p[0], -180), 180), math.Min(math.Max(p[1], -maxMercatorLat), maxMercatorLat)}
	}
	lo, ok1 := TileAt(clamp(orb.Point{b.Min[0], b.Max[1]}), z) // north-west corner: smallest x and y
	hi, ok2 := TileAt(clamp(orb.Point{b.Max[0], b.Min[1]}), z)
	if !ok1 || !ok2 || hi.X < lo.X || hi.Y < lo.Y {
		return nil, fmt.Errorf("%w: %q: study area %v is not a valid longitude/latitude box", ErrUnits, spec, b)
	}
	maxTiles := opts.MaxTiles
	if maxTiles <= 0 {
		maxTiles = 1 << 22
	}
	nx, ny := hi.X-lo.X+1, hi.Y-lo.Y+1
	if uint64(nx)*uint64(ny) > uint64(maxTiles) {
		return nil, fmt.Errorf("%w: %q gives %d×%d tiles over the study area, more than %d; use a lower zoom",
			ErrUnits, spec, nx, ny, maxTiles)
	}
	return &Units{source: spec, tiles: true, zoom: z, minX: lo.X, minY: lo.Y, nx: nx, ny: ny}, nil
}

// FromGeoJSON builds polygon units from a GeoJSON FeatureCollection
// (RFC 7946); name is used in messages. Each Polygon or MultiPolygon feature is
// a unit named by opts.IDProperty. Features with other geometry types are
// skipped with a warning (Warnings). It is an error, naming the feature, when a
// feature cannot be parsed, has no id or a duplicate id, or has an invalid
// polygon: a ring with fewer than four positions, an unclosed ring, a
// non-finite coordinate, zero area, or edges that cross or touch other than at
// their shared vertex (self-intersection, checked with a sweep over edge
// bounds). Holes are not checked to lie inside their shell. Overlapping
// units (see Overlaps and Options.OverlapTolerance) are refused when
// opts.Bound is set and listed in Warnings otherwise; where units overlap,
// Locate gives the first in file order. A file that is not JSON (a
// GeoPackage, a shapefile, KML), a "crs" member other than WGS 84
// longitude/latitude, or coordinates outside ±180/±90 are refused with the
// ogr2ogr command that fixes them; with opts.Bound set, so are units that
// all miss it (naming swapped axes when swapping them would help).
func FromGeoJSON(name string, data []byte, opts Options) (*Units, error) {
	prop, nameProp := opts.IDProperty, cmp.Or(opts.NameProperty, "name")
	if prop == "" {
		prop = "id"
	}
	if what := sniffFormat(data); what != "" {
		return nil, &FileError{File: name, Feature: -1, Err: fmt.Errorf("the file is %s, not GeoJSON; convert it: ogr2ogr -f GeoJSON -t_srs EPSG:4326 units.geojson %s", what, name)}
	}
	var fc struct {
		Type     string            `json:"type"`
		CRS      json.RawMessage   `json:"crs"`
		Features []json.RawMessage `json:"features"`
	}
	if err := json.Unmarshal(data, &fc); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			return nil, &FileError{File: name, Feature: -1, Err: fmt.Errorf("JSON syntax error at byte offset %d: %w", se.Offset, err)}
		}
		return nil, &FileError{File: name, Feature: -1, Err: err}
	}
	if fc.Type != "FeatureCollection" {
		return nil, &FileError{File: name, Feature: -1, Err: fmt.Errorf("top-level type is %q, want FeatureCollection", fc.Type)}
	}
	if err := checkCRS(name, fc.CRS); err != nil {
		return nil, &FileError{File: name, Feature: -1, Err: err}
	}
	u := &Units{source: name, byID: map[string]int{}}
	seen := map[string]int{}
	for i, raw := range fc.Features {
		f, err := geojson.UnmarshalFeature(raw)
		if err != nil {
			return nil, &FileError{File: name, Feature: i, Err: err}
		}
		var mp orb.MultiPolygon
		switch g := f.Geometry.(type) {
		case orb.Polygon:
			mp = orb.MultiPolygon{g}
		case orb.MultiPolygon:
			mp = g
		case nil:
			u.warnings = append(u.warnings, fmt.Sprintf("%s: feature %d has no geometry; skipped", name, i))
			continue
		default:
			u.warnings = append(u.warnings, fmt.Sprintf("%s: feature %d is a %s, not a Polygon or MultiPolygon; skipped", name, i, g.GeoJSONType()))
			continue
		}
		id, err := featureID(f, prop)
		if err != nil {
			return nil, &FileError{File: name, Feature: i, Err: err}
		}
		if j, dup := seen[id]; dup {
			return nil, &FileError{File: name, Feature: i, Err: fmt.Errorf("duplicate unit id %q (also feature %d)", id, j)}
		}
		seen[id] = i
		if err := checkRange(name, mp); err != nil {
			return nil, &FileError{File: name, Feature: i, Err: fmt.Errorf("unit %q: %w", id, err)}
		}
		if err := validMultiPolygon(mp); err != nil {
			return nil, &FileError{File: name, Feature: i, Err: fmt.Errorf("unit %q: %w", id, err)}
		}
		nm, _ := f.Properties[nameProp].(string)
		u.byID[id] = len(u.ids)
		u.ids = append(u.ids, id)
		u.names = append(u.names, nm)
		u.polys = append(u.polys, mp)
		u.bounds = append(u.bounds, mp.Bound())
	}
	if len(u.polys) == 0 {
		return nil, &FileError{File: name, Feature: -1, Err: fmt.Errorf("no Polygon or MultiPolygon features among %d", len(fc.Features))}
	}
	if err := u.checkArea(opts.Bound); err != nil {
		return nil, &FileError{File: name, Feature: -1, Err: err}
	}
	if err := u.checkOverlaps(opts.overlapTolerance()); err != nil {
		if !opts.Bound.IsZero() {
			return nil, &FileError{File: name, Feature: -1, Err: err}
		}
		u.warnings = append(u.warnings, fmt.Sprintf("%s: %v", name, err))
	}
	u.grid = newUnitGrid(u.bounds)
	return u, nil
}

// featureID returns the unit id of f from property prop.
func featureID(f *geojson.Feature, prop string) (string, error) {
	v, ok := f.Properties[prop]
	if !ok && prop == "id" && f.ID != nil {
		v, ok = f.ID, true
	}
	if !ok || v == nil {
		return "", fmt.Errorf("no %q property for the unit id", prop)
	}
	switch x := v.(type) {
	case string:
		if x == "" {
			return "", fmt.Errorf("empty %q property", prop)
		}
		return x, nil
	case float64:
		if x != math.Trunc(x) || math.Abs(x) > 1<<53 {
			return "", fmt.Errorf("%q property %v is not an integer or a string", prop, x)
		}
		return strconv.FormatInt(int64(x), 10), nil
	}
	return "", fmt.Errorf("%q property is a %T, want a string or an integer", prop, v)
}

// validMultiPolygon checks the rings of every polygon of mp.
func validMultiPolygon(mp orb.MultiPolygon) error {
	if len(mp) == 0 {
		return errors.New("empty geometry")
	}
	for pi, p := range mp {
		if len(p) == 0 {
			return fmt.Errorf("polygon %d has no rings", pi)
		}
		var segs []segment
		var rings []orb.Ring
		for ri, r := range p {
			for _, pt := range r {
				if math.IsNaN(pt[0]) || math.IsNaN(pt[1]) || math.IsInf(pt[0], 0) || math.IsInf(pt[1], 0) {
					return fmt.Errorf("polygon %d ring %d: non-finite coordinate", pi, ri)
				}
			}
			if len(r) < 4 {
				return fmt.Errorf("polygon %d ring %d has %d positions, need at least 4", pi, ri, len(r))
			}
			if r[0] != r[len(r)-1] {
				return fmt.Errorf("polygon %d ring %d is not closed (first %v, last %v)", pi, ri, r[0], r[len(r)-1])
			}
			// Drop repeated consecutive positions: allowed, but they make
			// zero-length edges.
			clean := orb.Ring{r[0]}
			for _, pt := range r[1:] {
				if pt != clean[len(clean)-1] {
					clean = append(clean, pt)
				}
			}
			if len(clean) < 4 {
				return fmt.Errorf("polygon %d ring %d has fewer than 3 distinct positions", pi, ri)
			}
			rings = append(rings, clean)
			m := len(clean) - 1
			for k := range m {
				segs = append(segs, segment{a: clean[k], b: clean[k+1], ring: ri, pos: k, edges: m})
			}
		}
		if a, b, at, bad := firstCrossing(segs); bad {
			if a.ring == b.ring {
				return fmt.Errorf("polygon %d ring %d intersects itself near (%g, %g)", pi, a.ring, at[0], at[1])
			}
			return fmt.Errorf("polygon %d rings %d and %d cross near (%g, %g)", pi, min(a.ring, b.ring), max(a.ring, b.ring), at[0], at[1])
		}
		// With no crossings a ring of zero area can only be degenerate.
		for ri, r := range rings {
			if planar.Area(r) == 0 {
				return fmt.Errorf("polygon %d ring %d has zero area", pi, ri)
			}
		}
	}
	return nil
}

// segment is one ring edge a→b: edge pos of the ring's edges edges.
type segment struct {
	a, b       orb.Point
	ring, pos  int
	edges      int
	minX, maxX float64
}

// firstCrossing looks for two edges of one polygon that meet where they may
// not: edges of the same ring anywhere but a shared end vertex (and adjacent
// edges folding back on each other), edges of different rings crossing or
// overlapping (a single touching point is allowed). Edges are sorted by
// their west end and compared only while their x ranges overlap.
func firstCrossing(segs []segment) (segment, segment, orb.Point, bool) {
	for i := range segs {
		s := &segs[i]
		s.minX, s.maxX = math.Min(s.a[0], s.b[0]), math.Max(s.a[0], s.b[0])
	}
	sort.Slice(segs, func(i, j int) bool { return segs[i].minX < segs[j].minX })
	for i := range segs {
		s := segs[i]
		for j := i + 1; j < len(segs) && segs[j].minX <= s.maxX; j++ {
			t := segs[j]
			if math.Max(s.a[1], s.b[1]) < math.Min(t.a[1], t.b[1]) || math.Max(t.a[1], t.b[1]) < math.Min(s.a[1], s.b[1]) {
				continue
			}
			if s.ring == t.ring {
				if adjacent(s, t) {
					// They share one vertex; bad only if they overlap along a line.
					if collinearOverlap(s, t) {
						return s, t, sharedVertex(s, t), true
					}
					continue
				}
				if at, ok := intersects(s.a, s.b, t.a, t.b); ok {
					return s, t, at, true
				}
				continue
			}
			if collinearOverlap(s, t) {
				return s, t, s.a, true
			}
			if at, ok := properCross(s.a, s.b, t.a, t.b); ok {
				return s, t, at, true
			}
		}
	}
	return segment{}, segment{}, orb.Point{}, false
}

func adjacent(s, t segment) bool {
	d := s.pos - t.pos
	return d == 1 || d == -1 || (s.edges > 2 && (d == s.edges-1 || d == -(s.edges-1)))
}

func sharedVertex(s, t segment) orb.Point {
	if s.a == t.a || s.a == t.b {
		return s.a
	}
	return s.b
}

// orient is the sign of the cross product (b − a) × (c − a).
func orient(a, b, c orb.Point) int {
	v := (b[0]-a[0])*(c[1]-a[1]) - (b[1]-a[1])*(c[0]-a[0])
	switch {
	case v > 0:
		return 1
	case v < 0:
		return -1
	}
	return 0
}

// onSegment reports whether c, collinear with a–b, lies within its box.
func onSegment(a, b, c orb.Point) bool {
	return math.Min(a[0], b[0]) <= c[0] && c[0] <= math.Max(a[0], b[0]) &&
		math.Min(a[1], b[1]) <= c[1] && c[1] <= math.Max(a[1], b[1])
}

// intersects reports whether segments p1–p2 and q1–q2 share any point, and one such point.
func intersects(p1, p2, q1, q2 orb.Point) (orb.Point, bool) {
	o1, o2 := orient(p1, p2, q1), orient(p1, p2, q2)
	o3, o4 := orient(q1, q2, p1), orient(q1, q2, p2)
	if o1 != o2 && o3 != o4 {
		if at, ok := properCross(p1, p2, q1, q2); ok {
			return at, true
		}
		// One endpoint touches the other segment.
		for _, c := range []struct{ a, b, c orb.Point }{{p1, p2, q1}, {p1, p2, q2}, {q1, q2, p1}, {q1, q2, p2}} {
			if orient(c.a, c.b, c.c) == 0 && onSegment(c.a, c.b, c.c) {
				return c.c, true
			}
		}
		return p1, true
	}
	switch {
	case o1 == 0 && onSegment(p1, p2, q1):
		return q1, true
	case o2 == 0 && onSegment(p1, p2, q2):
		return q2, true
	case o3 == 0 && onSegment(q1, q2, p1):
		return p1, true
	case o4 == 0 && onSegment(q1, q2, p2):
		return p2, true
	}
	return orb.Point{}, false
}

// properCross reports whether the segments cross at a point interior to both.
func properCross(p1, p2, q1, q2 orb.Point) (orb.Point, bool) {
	o1, o2 := orient(p1, p2, q1), orient(p1, p2, q2)
	o3, o4 := orient(q1, q2, p1), orient(q1, q2, p2)
	if o1*o2 >= 0 || o3*o4 >= 0 {
		return orb.Point{}, false
	}
	d := (p2[0]-p1[0])*(q2[1]-q1[1]) - (p2[1]-p1[1])*(q2[0]-q1[0])
	t := ((q1[0]-p1[0])*(q2[1]-q1[1]) - (q1[1]-p1[1])*(q2[0]-q1[0])) / d
	return orb.Point{p1[0] + t*(p2[0]-p1[0]), p1[1] + t*(p2[1]-p1[1])}, true
}

// collinearOverlap reports whether two collinear segments share more than a point.
func collinearOverlap(s, t segment) bool {
	if orient(s.a, s.b, t.a) != 0 || orient(s.a, s.b, t.b) != 0 {
		return false
	}
	// Project on the longer axis and compare intervals.
	ax := 0
	if math.Abs(s.b[0]-s.a[0]) < math.Abs(s.b[1]-s.a[1]) {
		ax = 1
	}
	s0, s1 := math.Min(s.a[ax], s.b[ax]), math.Max(s.a[ax], s.b[ax])
	t0, t1 := math.Min(t.a[ax], t.b[ax]), math.Max(t.a[ax], t.b[ax])
	return math.Min(s1, t1) > math.Max(s0, t0)
}

// unitGrid is a uniform grid over the units' extent; each cell lists, in
// ascending order, the units whose bound meets it.
type unitGrid struct {
	extent orb.Bound
	nx, ny int
	cells  [][]int32
}

func newUnitGrid(bounds []orb.Bound) unitGrid {
	ext := bounds[0]
	for _, b := range bounds[1:] {
		ext = ext.Union(b)
	}
	// About four cells per unit, at most 1024 cells a side.
	side := int(math.Ceil(2 * math.Sqrt(float64(len(bounds)))))
	side = max(1, min(side, 1024))
	g := unitGrid{extent: ext, nx: side, ny: side, cells: make([][]int32, side*side)}
	for i, b := range bounds {
		x0, y0 := g.cell(b.Min)
		x1, y1 := g.cell(b.Max)
		for y := y0; y <= y1; y++ {
			for x := x0; x <= x1; x++ {
				g.cells[y*g.nx+x] = append(g.cells[y*g.nx+x], int32(i))
			}
		}
	}
	return g
}

// cell returns the grid cell of a point inside the extent.
func (g unitGrid) cell(p orb.Point) (int, int) {
	f := func(v, lo, hi float64, n int) int {
		if hi <= lo {
			return 0
		}
		c := int((v - lo) / (hi - lo) * float64(n))
		return max(0, min(c, n-1))
	}
	return f(p[0], g.extent.Min[0], g.extent.Max[0], g.nx), f(p[1], g.extent.Min[1], g.extent.Max[1], g.ny)
}

// Len returns the number of units.
func (u *Units) Len() int {
	if u.tiles {
		return int(u.nx) * int(u.ny)
	}
	return len(u.ids)
}

// Source returns the specification or file the units came from.
func (u *Units) Source() string { return u.source }

// Warnings returns the messages about skipped features, one per feature.
func (u *Units) Warnings() []string { return u.warnings }

// tile returns unit i as a tile.
func (u *Units) tile(i int) Tile {
	return Tile{maptile.New(u.minX+uint32(i%int(u.nx)), u.minY+uint32(i/int(u.nx)), maptile.Zoom(u.zoom))}
}

// ID returns unit i's id: "Z/X/Y" for tiles, the id property for polygons.
func (u *Units) ID(i int) string {
	if u.tiles {
		return u.tile(i).String()
	}
	return u.ids[i]
}

// Name returns unit i's name: the "name" property of a GeoJSON unit or the
// name tag of a boundary relation; empty for tiles and unnamed units.
func (u *Units) Name(i int) string {
	if u.tiles || i >= len(u.names) {
		return ""
	}
	return u.names[i]
}

// Index returns the unit with the given id.
func (u *Units) Index(id string) (int, bool) {
	if u.tiles {
		var t Tile
		if _, err := fmt.Sscanf(id, "%d/%d/%d", &t.Z, &t.X, &t.Y); err != nil || t.String() != id || int(t.Z) != u.zoom {
			return 0, false
		}
		if t.X < u.minX || t.Y < u.minY || t.X-u.minX >= u.nx || t.Y-u.minY >= u.ny {
			return 0, false
		}
		return int(t.Y-u.minY)*int(u.nx) + int(t.X-u.minX), true
	}
	i, ok := u.byID[id]
	return i, ok
}

// Geometry returns unit i's shape: the tile's rectangle as an orb.Polygon,
// or the unit's orb.MultiPolygon (shared: do not modify).
func (u *Units) Geometry(i int) orb.Geometry {
	if u.tiles {
		return u.tile(i).Bound().ToPolygon()
	}
	return u.polys[i]
}

// Bound returns unit i's bounding box in degrees.
func (u *Units) Bound(i int) orb.Bound {
	if u.tiles {
		return u.tile(i).Bound()
	}
	return u.bounds[i]
}

// Centroid returns unit i's planar area centroid in longitude/latitude
// (orb/planar.CentroidArea), for labels and map markers.
func (u *Units) Centroid(i int) orb.Point {
	c, _ := planar.CentroidArea(u.Geometry(i))
	return c
}

// Area returns unit i's area in square metres on a sphere of radius
// orb.EarthRadius (orb/geo.Area).
func (u *Units) Area(i int) float64 {
	return geo.Area(u.Geometry(i))
}

// Locate returns the unit holding p (longitude, latitude). For tiles it is
// the tile of TileAt, if inside the study area; for polygons the first unit
// in file order whose polygon holds p, boundary included
// (orb/planar.MultiPolygonContains), found through a uniform grid over the
// units' bounds. A point in no unit returns ok false and is counted (Outside).
func (u *Units) Locate(p orb.Point) (int, bool) {
	i, ok := u.locate(p)
	if !ok {
		u.outside.Add(1)
	}
	return i, ok
}

func (u *Units) locate(p orb.Point) (int, bool) {
	if u.tiles {
		t, ok := TileAt(p, u.zoom)
		if !ok || t.X < u.minX || t.Y < u.minY || t.X-u.minX >= u.nx || t.Y-u.minY >= u.ny {
			return 0, false
		}
		return int(t.Y-u.minY)*int(u.nx) + int(t.X-u.minX), true
	}
	if !u.grid.extent.Contains(p) {
		return 0, false
	}
	x, y := u.grid.cell(p)
	for _, i := range u.grid.cells[y*u.grid.nx+x] {
		if u.bounds[i].Contains(p) && planar.MultiPolygonContains(u.polys[i], p) {
			return int(i), true
		}
	}
	return 0, false
}

// Outside returns how many Locate calls so far found no unit.
func (u *Units) Outside() int64 { return u.outside.Load() }
