package proposal

import (
	"bufio"
	"bytes"
	"context"
	"encoding/json"
	"encoding/xml"
	"errors"
	"fmt"
	"io"
	"iter"
	"math"
	"slices"
	"strconv"
	"strings"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geo"
	"github.com/paulmach/orb/geojson"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/rules"
)

// ctxEvery is how many features or XML tokens pass between context checks.
const ctxEvery = 4096

// ErrInvalid is the sentinel under errors about a proposal file.
var ErrInvalid = errors.New("proposal: bad proposal")

// ParseError is a problem with one feature or object of a proposal file.
// Where is "feature 12" (0-based index in a GeoJSON features array),
// "way/-4" or a byte offset; empty when the problem is with the whole file.
type ParseError struct {
	File  string
	Where string
	Err   error
}

func (e *ParseError) Error() string {
	if e.Where == "" {
		return fmt.Sprintf("%s: %v", e.File, e.Err)
	}
	return fmt.Sprintf("%s: %s: %v", e.File, e.Where, e.Err)
}

// Unwrap returns the cause; errors.Is(err, ErrInvalid) holds for every ParseError.
func (e *ParseError) Unwrap() []error { return []error{ErrInvalid, e.Err} }

// GeomKind is the shape of a proposed feature.
type GeomKind uint8

// The shapes of proposed features.
const (
	KindNone    GeomKind = iota // no geometry known (a relation other than a multipolygon)
	KindPoint                   // a node, a GeoJSON Point or MultiPoint
	KindLine                    // an open way, a LineString or MultiLineString
	KindPolygon                 // a closed area way, a multipolygon, a Polygon or MultiPolygon
)

// String returns "none", "point", "line" or "polygon".
func (k GeomKind) String() string {
	switch k {
	case KindPoint:
		return "point"
	case KindLine:
		return "line"
	case KindPolygon:
		return "polygon"
	}
	return "none"
}

// Feature is one feature a proposal would add.
type Feature struct {
	ID    string // "node/-1", "way/-5", "relation/-2", or "feature/N" for GeoJSON (N the 0-based index)
	Class string // rules class, "" when none
	Tags  osm.Tags
	Kind  GeomKind
	Geom  orb.Geometry // nil for KindNone
	Bound orb.Bound
	At    orb.Point // representative point: the point itself, else the bound's centre
}

// Proposal is a proposed import read from a file: its features, the number
// of OSM objects it would upload and what was wrong with the input.
type Proposal struct {
	Name     string
	Features []Feature
	// Changes counts the OSM objects the upload would create or modify:
	// every node (way nodes included), way and relation.
	Changes int
	// Deletes counts objects the file would delete (OsmChange delete blocks,
	// visible=false); they are changes too.
	Deletes  int
	Warnings []string
	// Skipped counts features or objects left out (see Warnings).
	Skipped int
	Bound   orb.Bound
}

// Options bounds the memory of a proposal read. The zero value takes
// the defaults.
type Options struct {
	// MaxFeatures is the most features kept (default 5,000,000); the read
	// stops with an error beyond it.
	MaxFeatures int
	// MaxNodes is the most node positions kept to build ways (default
	// 50,000,000, some 1.2 GB); the read stops with an error beyond it.
	MaxNodes int
	// MaxWarnings is how many warnings are kept word for word (default 50);
	// the rest are counted.
	MaxWarnings int
}

func (o Options) withDefaults() Options {
	if o.MaxFeatures <= 0 {
		o.MaxFeatures = 5_000_000
	}
	if o.MaxNodes <= 0 {
		o.MaxNodes = 50_000_000
	}
	if o.MaxWarnings <= 0 {
		o.MaxWarnings = 50
	}
	return o
}

// proposalBuilder collects features and warnings.
type proposalBuilder struct {
	p        *Proposal
	r        *rules.RuleSet
	opts     Options
	warnings int
}

func (b *proposalBuilder) warnf(format string, args ...any) {
	b.warnings++
	if len(b.p.Warnings) < b.opts.MaxWarnings {
		b.p.Warnings = append(b.p.Warnings, fmt.Sprintf(format, args...))
	}
}

func (b *proposalBuilder) add(f Feature) error {
	if len(b.p.Features) >= b.opts.MaxFeatures {
		return &ParseError{File: b.p.Name, Where: f.ID, Err: fmt.Errorf("more than %d features; split the proposal or raise the limit", b.opts.MaxFeatures)}
	}
	f.Class = b.r.Class(f.Tags)
	if f.Geom != nil {
		f.Bound = f.Geom.Bound()
		if p, ok := f.Geom.(orb.Point); ok {
			f.At = p
		} else {
			f.At = f.Bound.Center()
		}
		if len(b.p.Features) == 0 || b.p.Bound.IsZero() {
			b.p.Bound = f.Bound
		} else {
			b.p.Bound = b.p.Bound.Union(f.Bound)
		}
	}
	b.p.Features = append(b.p.Features, f)
	return nil
}

func (b *proposalBuilder) finish() (*Proposal, error) {
	if b.warnings > len(b.p.Warnings) {
		b.p.Warnings = append(b.p.Warnings, fmt.Sprintf("%d more warnings not shown", b.warnings-len(b.p.Warnings)))
	}
	if len(b.p.Features) == 0 {
		return b.p, &ParseError{File: b.p.Name, Err: errors.New("no features to assess")}
	}
	return b.p, nil
}

// validPoint reports whether p is a finite longitude/latitude.
func validPoint(p orb.Point) bool {
	return p[0] >= -180 && p[0] <= 180 && p[1] >= -90 && p[1] <= 90
}

// pendingWay is a way waiting for its node positions.
type pendingWay struct {
	id    osm.WayID
	nodes []osm.NodeID
	tags  osm.Tags
}

// ReadOSM reads a proposal given as OSM objects (from OSM XML or
// OsmChange; cmd passes ingest's reader): every tagged node is a point
// feature; every tagged way a line, or a polygon when closed and not a
// linear class (common practice: highway, barrier, railway, waterway and
// power lines stay lines on closed ways unless area=yes); every tagged
// multipolygon relation a polygon made of its closed member ways (outer and
// inner roles), other tagged relations features without geometry. Node
// positions are kept in a map bounded by opts.MaxNodes; ways and relations
// may come in any order. A way whose nodes are missing from the file is
// reported and left without geometry (a warning per way). The sequence's
// errors end the read and are returned, with the features read so far.
func ReadOSM(ctx context.Context, name string, objs iter.Seq2[osm.Object, error], r *rules.RuleSet, opts Options) (*Proposal, error) {
	opts = opts.withDefaults()
	b := &proposalBuilder{p: &Proposal{Name: name}, r: r, opts: opts}
	nodes := make(map[osm.NodeID]orb.Point)
	var ways []pendingWay
	wayIdx := make(map[osm.WayID]int)
	var rels []*osm.Relation
	wayNodes := 0
	n := 0
	for o, err := range objs {
		if err != nil {
			return b.p, fmt.Errorf("%w: %w", ErrInvalid, err)
		}
		if n++; n%ctxEvery == 0 {
			if err := ctx.Err(); err != nil {
				return b.p, err
			}
		}
		switch v := o.(type) {
		case *osm.Node:
			if !v.Visible {
				b.p.Deletes++
				continue
			}
			b.p.Changes++
			p := orb.Point{v.Lon, v.Lat}
			if !validPoint(p) {
				b.p.Skipped++
				b.warnf("node/%d: position %v outside longitude ±180, latitude ±90; left out", v.ID, p)
				continue
			}
			if len(nodes) >= opts.MaxNodes {
				return b.p, &ParseError{File: name, Where: fmt.Sprintf("node/%d", v.ID), Err: fmt.Errorf("more than %d nodes; split the proposal or raise the limit", opts.MaxNodes)}
			}
			nodes[v.ID] = p
			if len(v.Tags) > 0 {
				if err := b.add(Feature{ID: fmt.Sprintf("node/%d", v.ID), Tags: v.Tags, Kind: KindPoint, Geom: p}); err != nil {
					return b.p, err
				}
			}
		case *osm.Way:
			if !v.Visible {
				b.p.Deletes++
				continue
			}
			b.p.Changes++
			ids := make([]osm.NodeID, len(v.Nodes))
			for i, wn := range v.Nodes {
				ids[i] = wn.ID
			}
			if wayNodes += len(ids); wayNodes > opts.MaxNodes {
				return b.p, &ParseError{File: name, Where: fmt.Sprintf("way/%d", v.ID), Err: fmt.Errorf("more than %d way node references; split the proposal or raise the limit", opts.MaxNodes)}
			}
			wayIdx[v.ID] = len(ways)
			ways = append(ways, pendingWay{id: v.ID, nodes: ids, tags: v.Tags})
		case *osm.Relation:
			if !v.Visible {
				b.p.Deletes++
				continue
			}
			b.p.Changes++
			if len(v.Tags) > 0 {
				rels = append(rels, v)
			}
		}
	}
	line := func(w *pendingWay) (orb.LineString, int) {
		ls := make(orb.LineString, 0, len(w.nodes))
		missing := 0
		for _, id := range w.nodes {
			p, ok := nodes[id]
			if !ok {
				missing++
				continue
			}
			ls = append(ls, p)
		}
		return ls, missing
	}
	for i := range ways {
		w := &ways[i]
		if len(w.tags) == 0 {
			continue
		}
		id := fmt.Sprintf("way/%d", w.id)
		ls, missing := line(w)
		f := Feature{ID: id, Tags: w.tags}
		switch {
		case missing > 0:
			b.warnf("%s: %d of its %d nodes are not in the file; no geometry", id, missing, len(w.nodes))
		case len(ls) < 2:
			b.warnf("%s: %d node(s); a way needs at least 2; no geometry", id, len(ls))
		case closedArea(w.nodes, w.tags):
			f.Kind, f.Geom = KindPolygon, orb.Polygon{orb.Ring(ls)}
		default:
			f.Kind, f.Geom = KindLine, ls
		}
		if err := b.add(f); err != nil {
			return b.p, err
		}
	}
	for _, rel := range rels {
		id := fmt.Sprintf("relation/%d", rel.ID)
		f := Feature{ID: id, Tags: rel.Tags}
		if t := rel.Tags.Find("type"); t == "multipolygon" || t == "boundary" {
			mp, problems := relationPolygons(rel, ways, wayIdx, line)
			for _, pr := range problems {
				b.warnf("%s: %s", id, pr)
			}
			if len(mp) > 0 {
				f.Kind, f.Geom = KindPolygon, mp
			}
		}
		if err := b.add(f); err != nil {
			return b.p, err
		}
	}
	return b.finish()
}

// closedArea tells a closed way that is an area from one that is a closed
// line (common practice, OSM wiki "Key:area"): area=yes makes an area,
// area=no a line; closed ways of linear classes are lines.
func closedArea(nodes []osm.NodeID, tags osm.Tags) bool {
	if len(nodes) < 4 || nodes[0] != nodes[len(nodes)-1] {
		return false
	}
	switch tags.Find("area") {
	case "yes":
		return true
	case "no":
		return false
	}
	for _, k := range []string{"highway", "barrier", "railway", "waterway", "power", "route"} {
		if tags.Find(k) != "" {
			return false
		}
	}
	return true
}

// relationPolygons builds a multipolygon from the closed member ways of rel:
// outer rings become polygons, inner rings holes of the outer ring holding
// their first point.
func relationPolygons(rel *osm.Relation, ways []pendingWay, wayIdx map[osm.WayID]int, line func(*pendingWay) (orb.LineString, int)) (orb.MultiPolygon, []string) {
	var mp orb.MultiPolygon
	var inners []orb.Ring
	var problems []string
	for _, m := range rel.Members {
		if m.Type != osm.TypeWay {
			continue
		}
		i, ok := wayIdx[osm.WayID(m.Ref)]
		if !ok {
			problems = append(problems, fmt.Sprintf("member way/%d is not in the file", m.Ref))
			continue
		}
		w := &ways[i]
		ls, missing := line(w)
		if missing > 0 || len(ls) < 4 || w.nodes[0] != w.nodes[len(w.nodes)-1] {
			problems = append(problems, fmt.Sprintf("member way/%d is not a closed ring with all its nodes; left out (rings made of several ways are not assembled)", m.Ref))
			continue
		}
		if m.Role == "inner" {
			inners = append(inners, orb.Ring(ls))
		} else {
			mp = append(mp, orb.Polygon{orb.Ring(ls)})
		}
	}
	for _, in := range inners {
		placed := false
		for i := range mp {
			if ringContains(mp[i][0], in[0]) {
				mp[i] = append(mp[i], in)
				placed = true
				break
			}
		}
		if !placed {
			problems = append(problems, "an inner ring lies in no outer ring; left out")
		}
	}
	return mp, problems
}

// ringContains is the even-odd ray test (common practice).
func ringContains(r orb.Ring, p orb.Point) bool {
	in := false
	for i, j := 0, len(r)-1; i < len(r); j, i = i, i+1 {
		a, b := r[i], r[j]
		if (a[1] > p[1]) != (b[1] > p[1]) && p[0] < (b[0]-a[0])*(p[1]-a[1])/(b[1]-a[1])+a[0] {
			in = !in
		}
	}
	return in
}

// ReadGeoJSON reads a proposal given as an RFC 7946 GeoJSON
// FeatureCollection (or a single Feature), feature by feature with a
// streaming decoder, each feature with orb/geojson. Properties become tags:
// strings as they are, numbers and booleans written as text with a warning,
// null, objects and arrays left out with a warning. Point and MultiPoint
// features are points, LineString and MultiLineString lines, Polygon and
// MultiPolygon polygons; a GeometryCollection (mixed geometry), a missing
// geometry or coordinates outside longitude ±180 / latitude ±90 leave the
// feature out with a warning naming its index. Malformed JSON ends the read
// with an error naming the feature index and byte offset.
func ReadGeoJSON(ctx context.Context, name string, rd io.Reader, r *rules.RuleSet, opts Options) (*Proposal, error) {
	opts = opts.withDefaults()
	b := &proposalBuilder{p: &Proposal{Name: name}, r: r, opts: opts}
	br := bufio.NewReader(rd)
	if bom, _ := br.Peek(3); string(bom) == "\xef\xbb\xbf" {
		br.Discard(3) // a UTF-8 byte order mark, as some GIS tools write
	}
	dec := json.NewDecoder(br)
	dec.UseNumber()
	fail := func(where string, err error) (*Proposal, error) {
		return b.p, &ParseError{File: name, Where: where, Err: err}
	}
	tok, err := dec.Token()
	if err != nil {
		return fail("", fmt.Errorf("not JSON: %w", err))
	}
	if d, ok := tok.(json.Delim); !ok || d != '{' {
		return fail("", errors.New("not a GeoJSON object"))
	}
	// Walk the top-level members; the features array is decoded one feature at a time.
	kind := ""
	single := map[string]json.RawMessage{}
	for dec.More() {
		kt, err := dec.Token()
		if err != nil {
			return fail(fmt.Sprintf("byte %d", dec.InputOffset()), err)
		}
		key, _ := kt.(string)
		switch key {
		case "type":
			if err := dec.Decode(&kind); err != nil {
				return fail(fmt.Sprintf("byte %d", dec.InputOffset()), fmt.Errorf("member type: %w", err))
			}
		case "features":
			if t, err := dec.Token(); err != nil || t != json.Delim('[') {
				return fail(fmt.Sprintf("byte %d", dec.InputOffset()), errors.New(`"features" is not an array`))
			}
			for i := 0; dec.More(); i++ {
				if i%ctxEvery == 0 {
					if err := ctx.Err(); err != nil {
						return b.p, err
					}
				}
				var raw json.RawMessage
				if err := dec.Decode(&raw); err != nil {
					return fail(fmt.Sprintf("feature %d (byte %d)", i, dec.InputOffset()), err)
				}
				if err := b.geojsonFeature(i, raw); err != nil {
					return b.p, err
				}
			}
			if _, err := dec.Token(); err != nil {
				return fail(fmt.Sprintf("byte %d", dec.InputOffset()), err)
			}
		default:
			var raw json.RawMessage
			if err := dec.Decode(&raw); err != nil {
				return fail(fmt.Sprintf("byte %d", dec.InputOffset()), err)
			}
			single[key] = raw
		}
	}
	switch kind {
	case "FeatureCollection":
	case "Feature":
		single["type"] = json.RawMessage(`"Feature"`)
		raw, _ := json.Marshal(single)
		if err := b.geojsonFeature(0, raw); err != nil {
			return b.p, err
		}
	default:
		return fail("", fmt.Errorf("GeoJSON type %q; want FeatureCollection or Feature", kind))
	}
	return b.finish()
}

// geojsonFeature adds feature i.
func (b *proposalBuilder) geojsonFeature(i int, raw []byte) error {
	where := fmt.Sprintf("feature %d", i)
	// Properties are decoded with UseNumber so that numbers keep their text
	// ("0.0" stays "0.0"); the geometry with orb/geojson.
	var f struct {
		Type       string          `json:"type"`
		Geometry   json.RawMessage `json:"geometry"`
		Properties map[string]any  `json:"properties"`
	}
	dec := json.NewDecoder(bytes.NewReader(raw))
	dec.UseNumber()
	if err := dec.Decode(&f); err != nil || f.Type != "Feature" {
		if err == nil {
			err = fmt.Errorf("type %q, want Feature", f.Type)
		}
		b.p.Skipped++
		b.warnf("%s: %v; left out", where, err)
		return nil
	}
	var geom orb.Geometry
	if len(f.Geometry) > 0 && string(f.Geometry) != "null" {
		g, err := geojson.UnmarshalGeometry(f.Geometry)
		if err != nil {
			b.p.Skipped++
			b.warnf("%s: geometry: %v; left out", where, err)
			return nil
		}
		geom = g.Geometry()
	}
	pf := Feature{ID: fmt.Sprintf("feature/%d", i)}
	keys := make([]string, 0, len(f.Properties))
	for k := range f.Properties {
		keys = append(keys, k)
	}
	slices.Sort(keys)
	for _, k := range keys {
		v := f.Properties[k]
		var s string
		switch x := v.(type) {
		case string:
			s = x
		case json.Number:
			s = x.String()
			b.warnf("%s: property %q is a number; written as the text %q", where, k, s)
		case float64:
			s = strconv.FormatFloat(x, 'f', -1, 64)
			b.warnf("%s: property %q is a number; written as the text %q", where, k, s)
		case bool:
			s = strconv.FormatBool(x)
			b.warnf("%s: property %q is a boolean; written as the text %q", where, k, s)
		case nil:
			b.warnf("%s: property %q is null; left out", where, k)
			continue
		default:
			b.warnf("%s: property %q is an object or array; left out", where, k)
			continue
		}
		if s == "" {
			continue
		}
		pf.Tags = append(pf.Tags, osm.Tag{Key: k, Value: s})
	}
	kind, changes, problem := geomInfo(geom)
	if problem != "" {
		b.p.Skipped++
		b.warnf("%s: %s; left out", where, problem)
		return nil
	}
	pf.Kind, pf.Geom = kind, geom
	b.p.Changes += changes
	return b.add(pf)
}

// geomInfo returns a GeoJSON geometry's kind, the OSM objects it takes
// (nodes, ways, a multipolygon relation for holes or several parts) and what
// is wrong with it.
func geomInfo(g orb.Geometry) (GeomKind, int, string) {
	if g == nil {
		return KindNone, 0, "no geometry"
	}
	okPts := func(ps []orb.Point) bool {
		for _, p := range ps {
			if !validPoint(p) {
				return false
			}
		}
		return true
	}
	const badCoord = "coordinates outside longitude ±180, latitude ±90"
	ring := func(r orb.Ring) (int, string) {
		if len(r) < 4 || r[0] != r[len(r)-1] {
			return 0, "a polygon ring needs 4 or more positions, first and last equal (RFC 7946 3.1.6)"
		}
		if !okPts(r) {
			return 0, badCoord
		}
		return len(r) - 1 + 1, "" // nodes (closing node shared) and the way
	}
	poly := func(p orb.Polygon) (int, string) {
		if len(p) == 0 {
			return 0, "empty polygon"
		}
		n := 0
		for _, r := range p {
			c, pr := ring(r)
			if pr != "" {
				return 0, pr
			}
			n += c
		}
		return n, ""
	}
	switch v := g.(type) {
	case orb.Point:
		if !validPoint(v) {
			return 0, 0, badCoord
		}
		return KindPoint, 1, ""
	case orb.MultiPoint:
		if len(v) == 0 || !okPts(v) {
			return 0, 0, "empty MultiPoint or " + badCoord
		}
		return KindPoint, len(v), ""
	case orb.LineString:
		if len(v) < 2 {
			return 0, 0, "a LineString needs 2 or more positions (RFC 7946 3.1.4)"
		}
		if !okPts(v) {
			return 0, 0, badCoord
		}
		return KindLine, len(v) + 1, ""
	case orb.MultiLineString:
		n := 0
		for _, l := range v {
			if len(l) < 2 || !okPts(l) {
				return 0, 0, "a MultiLineString part with fewer than 2 positions or " + badCoord
			}
			n += len(l) + 1
		}
		if n == 0 {
			return 0, 0, "empty MultiLineString"
		}
		return KindLine, n, ""
	case orb.Polygon:
		n, pr := poly(v)
		if pr != "" {
			return 0, 0, pr
		}
		if len(v) > 1 {
			n++ // a multipolygon relation holds the holes
		}
		return KindPolygon, n, ""
	case orb.MultiPolygon:
		n := 0
		for _, p := range v {
			c, pr := poly(p)
			if pr != "" {
				return 0, 0, pr
			}
			n += c
		}
		if n == 0 {
			return 0, 0, "empty MultiPolygon"
		}
		if len(v) > 1 || len(v[0]) > 1 {
			n++
		}
		return KindPolygon, n, ""
	case orb.Collection:
		return 0, 0, "a GeometryCollection mixes geometries; give each part its own feature"
	}
	return 0, 0, fmt.Sprintf("unsupported geometry %s", g.GeoJSONType())
}

// KeyShare is how many features of a group carry a key.
type KeyShare struct {
	Key   string  `json:"key"`
	With  int     `json:"with"`
	Share float64 `json:"share"`
}

// ClassProfile describes the proposed features of one class.
type ClassProfile struct {
	Class    string     `json:"class"` // "" for features without a class
	Features int        `json:"features"`
	Points   int        `json:"points"`
	Lines    int        `json:"lines"`
	Polygons int        `json:"polygons"`
	NoGeom   int        `json:"no_geometry"`
	LengthM  float64    `json:"length_m"` // total length of lines, metres (orb/geo.Length)
	AreaM2   float64    `json:"area_m2"`  // total area of polygons, m² (orb/geo.Area)
	Keys     []KeyShare `json:"keys"`     // every key but the class key, by share descending
}

// Profile summarises a proposal.
type Profile struct {
	Features   int            `json:"features"`
	Classes    []ClassProfile `json:"classes"` // by features descending, then class
	Changes    int            `json:"changes"`
	Deletes    int            `json:"deletes"`
	Changesets int            `json:"changesets"` // at APIChangesetLimit changes each
	Skipped    int            `json:"skipped"`
	Warnings   []string       `json:"warnings"`
	// Bound is [min_lon, min_lat, max_lon, max_lat]; nil without geometry.
	Bound []float64 `json:"bbox,omitempty"`
}

// APIChangesetLimit is the most changes the OSM API 0.6 accepts in one
// changeset (OSM wiki, "API v0.6", capabilities: changesets maximum_elements
// 10000).
const APIChangesetLimit = 10000

// ChangesetsNeeded returns how many changesets changes objects take at the
// API 0.6 limit: ⌈changes / 10,000⌉.
func ChangesetsNeeded(changes int) int {
	if changes <= 0 {
		return 0
	}
	return (changes + APIChangesetLimit - 1) / APIChangesetLimit
}

// Profile returns the proposal's profile: features by class, per-key
// completeness and geometry sizes, and the changesets its changes need.
func (p *Proposal) Profile() Profile {
	byClass := map[string]*ClassProfile{}
	keyCount := map[string]map[string]int{}
	for i := range p.Features {
		f := &p.Features[i]
		c := byClass[f.Class]
		if c == nil {
			c = &ClassProfile{Class: f.Class}
			byClass[f.Class] = c
			keyCount[f.Class] = map[string]int{}
		}
		c.Features++
		switch f.Kind {
		case KindPoint:
			c.Points++
		case KindLine:
			c.Lines++
			c.LengthM += geo.Length(f.Geom)
		case KindPolygon:
			c.Polygons++
			c.AreaM2 += math.Abs(geo.Area(f.Geom))
		default:
			c.NoGeom++
		}
		classKey, _, _ := strings.Cut(f.Class, "=")
		for _, t := range f.Tags {
			if t.Key != classKey && t.Value != "" {
				keyCount[f.Class][t.Key]++
			}
		}
	}
	pr := Profile{Features: len(p.Features), Changes: p.Changes + p.Deletes, Deletes: p.Deletes, Skipped: p.Skipped,
		Warnings: slices.Clone(p.Warnings), Classes: []ClassProfile{}}
	if pr.Warnings == nil {
		pr.Warnings = []string{}
	}
	pr.Changesets = ChangesetsNeeded(pr.Changes)
	if !p.Bound.IsZero() || len(p.Features) > 0 && p.Features[0].Geom != nil {
		pr.Bound = []float64{p.Bound.Min[0], p.Bound.Min[1], p.Bound.Max[0], p.Bound.Max[1]}
	}
	for class, c := range byClass {
		for k, n := range keyCount[class] {
			c.Keys = append(c.Keys, KeyShare{Key: k, With: n, Share: float64(n) / float64(c.Features)})
		}
		slices.SortFunc(c.Keys, func(a, b KeyShare) int {
			if a.With != b.With {
				return b.With - a.With
			}
			return strings.Compare(a.Key, b.Key)
		})
		if c.Keys == nil {
			c.Keys = []KeyShare{}
		}
		pr.Classes = append(pr.Classes, *c)
	}
	slices.SortFunc(pr.Classes, func(a, b ClassProfile) int {
		if a.Features != b.Features {
			return b.Features - a.Features
		}
		return strings.Compare(a.Class, b.Class)
	})
	return pr
}

// classShare returns the share of features of class that carry key, with the counts.
func (pr *Profile) classShare(class, key string) (with, total int, ok bool) {
	for _, c := range pr.Classes {
		if c.Class != class {
			continue
		}
		for _, k := range c.Keys {
			if k.Key == key {
				return k.With, c.Features, true
			}
		}
		return 0, c.Features, true
	}
	return 0, 0, false
}

// XMLObjects streams the nodes, ways and relations of an OSM XML or
// OsmChange proposal, as editors write them: negative ids, no versions or
// timestamps needed. An object is visible unless its element says
// visible="false" or action="delete" (JOSM's files), or it lies in an
// OsmChange <delete> block. Elements are decoded with the osm module's XML
// mapping. A syntax error ends the sequence with a *ParseError giving the
// line and column.
func XMLObjects(ctx context.Context, name string, r io.Reader) iter.Seq2[osm.Object, error] {
	return func(yield func(osm.Object, error) bool) {
		dec := xml.NewDecoder(r)
		fail := func(err error) {
			line, col := dec.InputPos()
			yield(nil, &ParseError{File: name, Where: fmt.Sprintf("line %d, column %d", line, col), Err: err})
		}
		inDelete := false
		n := 0
		for {
			if n++; n%ctxEvery == 0 && ctx.Err() != nil {
				yield(nil, ctx.Err())
				return
			}
			line, col := dec.InputPos()
			tok, err := dec.Token()
			if err == io.EOF {
				return
			}
			if err != nil {
				fail(err)
				return
			}
			switch t := tok.(type) {
			case xml.EndElement:
				if t.Name.Local == "delete" {
					inDelete = false
				}
			case xml.StartElement:
				var o osm.Object
				switch t.Name.Local {
				case "delete":
					inDelete = true
					continue
				case "node":
					o = new(osm.Node)
				case "way":
					o = new(osm.Way)
				case "relation":
					o = new(osm.Relation)
				default:
					continue
				}
				if err := dec.DecodeElement(o, &t); err != nil {
					yield(nil, &ParseError{File: name, Where: fmt.Sprintf("line %d, column %d, %s", line, col, t.Name.Local), Err: err})
					return
				}
				visible := !inDelete
				for _, a := range t.Attr {
					switch {
					case a.Name.Local == "visible":
						visible = visible && a.Value != "false"
					case a.Name.Local == "action" && a.Value == "delete":
						visible = false
					}
				}
				switch v := o.(type) {
				case *osm.Node:
					v.Visible = visible
				case *osm.Way:
					v.Visible = visible
				case *osm.Relation:
					v.Visible = visible
				}
				if !yield(o, nil) {
					return
				}
			}
		}
	}
}
