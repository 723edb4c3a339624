package spatial

import (
	"context"
	"fmt"
	"path"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/planar"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmgeojson"
)

// VersionReader is what admin:LEVEL units read from a history store: every
// version of one type in key order (id ascending, then version ascending),
// and the versions of one object. *ingest.Store meets it.
type VersionReader interface {
	ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error
	ObjectVersions(ctx context.Context, t osm.Type, id int64) ([]osm.Object, error)
}

// AdminSpec is a parsed "admin:LEVEL[,name=GLOB][,within=NAME|rID]"
// specification: the boundary=administrative relations of admin_level
// Level, optionally only those whose name tag matches the glob Name
// (path.Match syntax, case-insensitive) and those lying within the
// boundary named Within (any level; "r123" names relation 123). A name
// holding a comma is given by its relation id.
type AdminSpec struct {
	Level  string
	Name   string
	Within string
}

// ParseAdminSpec parses spec; ok is false when spec does not start with
// "admin:".
func ParseAdminSpec(spec string) (AdminSpec, bool, error) {
	rest, ok := strings.CutPrefix(spec, "admin:")
	if !ok {
		return AdminSpec{}, false, nil
	}
	parts := strings.Split(rest, ",")
	a := AdminSpec{Level: strings.TrimSpace(parts[0])}
	if n, err := strconv.Atoi(a.Level); err != nil || n < 1 || n > 15 {
		return a, true, fmt.Errorf("%w: %q: admin_level must be an integer from 1 to 15", ErrUnits, spec)
	}
	for _, p := range parts[1:] {
		k, v, _ := strings.Cut(p, "=")
		v = strings.TrimSpace(v)
		switch strings.TrimSpace(k) {
		case "name":
			if _, err := path.Match(v, ""); err != nil || v == "" {
				return a, true, fmt.Errorf("%w: %q: bad name pattern %q", ErrUnits, spec, v)
			}
			a.Name = v
		case "within":
			if v == "" {
				return a, true, fmt.Errorf("%w: %q: empty within", ErrUnits, spec)
			}
			a.Within = v
		default:
			return a, true, fmt.Errorf("%w: %q: unknown filter %q (want name=GLOB or within=NAME; a name holding a comma is given as r<relation id>)", ErrUnits, spec, p)
		}
	}
	return a, true, nil
}

// AssemblyError lists the boundary relations that could not be turned into
// polygons, each with its reason. It unwraps to ErrUnits.
type AssemblyError struct {
	Spec     string
	Failures []RelationFailure
}

// RelationFailure is one relation AdminUnits could not assemble.
type RelationFailure struct {
	ID     osm.RelationID
	Name   string
	Reason string
}

func (e *AssemblyError) Error() string {
	var b strings.Builder
	fmt.Fprintf(&b, "%s: %d boundary relation(s) could not be assembled:", e.Spec, len(e.Failures))
	for _, f := range e.Failures {
		fmt.Fprintf(&b, "\n  relation %d", f.ID)
		if f.Name != "" {
			fmt.Fprintf(&b, " (%s)", f.Name)
		}
		fmt.Fprintf(&b, ": %s", f.Reason)
	}
	return b.String()
}

// Unwrap returns ErrUnits.
func (e *AssemblyError) Unwrap() error { return ErrUnits }

// AdminUnits builds polygon units from the boundary=administrative
// relations of st as they were at time at (the last version with a
// timestamp at or before at; the latest when at is zero). A relation with
// no version that old (a snapshot store holds only the latest) is taken in
// its earliest version, with a warning. Rings are assembled from the
// member ways by the osm module's osmgeojson (ways joined end to end in
// either direction, outer rings counter-clockwise, inner rings given to the
// outer holding them) and then checked like a unit file's polygons. Unit
// ids are "r<relation id>", names the name tag. When some selected
// relations cannot be assembled (a member way or node missing or deleted,
// rings that do not close, crossing edges) the error is an *AssemblyError
// listing every one with its reason.
func AdminUnits(ctx context.Context, st VersionReader, spec AdminSpec, at time.Time) (*Units, error) {
	src := "admin:" + spec.Level
	rels, warns, err := relationsAt(ctx, st, at)
	if err != nil {
		return nil, err
	}
	var within *Units
	if spec.Within != "" {
		within, err = withinUnits(ctx, st, spec, rels, at)
		if err != nil {
			return nil, err
		}
	}
	u := &Units{source: src, byID: map[string]int{}, warnings: warns}
	var fails []RelationFailure
	for _, r := range rels {
		if r.Tags.Find("admin_level") != spec.Level || !nameMatches(spec.Name, r.Tags.Find("name")) {
			continue
		}
		mp, reason, w, err := assemble(ctx, st, r, at)
		if err != nil {
			return nil, err
		}
		u.warnings = append(u.warnings, w...)
		if reason != "" {
			fails = append(fails, RelationFailure{ID: r.ID, Name: r.Tags.Find("name"), Reason: reason})
			continue
		}
		if within != nil && !inside(mp, within) {
			continue
		}
		id := fmt.Sprintf("r%d", r.ID)
		u.byID[id] = len(u.ids)
		u.ids = append(u.ids, id)
		u.names = append(u.names, r.Tags.Find("name"))
		u.polys = append(u.polys, mp)
		u.bounds = append(u.bounds, mp.Bound())
	}
	if len(fails) > 0 {
		return nil, &AssemblyError{Spec: src, Failures: fails}
	}
	if len(u.ids) == 0 {
		what := fmt.Sprintf("admin_level=%s", spec.Level)
		if spec.Name != "" {
			what += fmt.Sprintf(" named %q", spec.Name)
		}
		if spec.Within != "" {
			what += fmt.Sprintf(" within %q", spec.Within)
		}
		return nil, fmt.Errorf("%w: %s: the store holds no boundary=administrative relation with %s", ErrUnits, src, what)
	}
	u.grid = newUnitGrid(u.bounds)
	return u, nil
}

func nameMatches(glob, name string) bool {
	if glob == "" {
		return true
	}
	ok, _ := path.Match(strings.ToLower(glob), strings.ToLower(name))
	return ok
}

// relationsAt returns the visible boundary=administrative relations as of
// at, in id order.
func relationsAt(ctx context.Context, st VersionReader, at time.Time) ([]*osm.Relation, []string, error) {
	var out []*osm.Relation
	var warns []string
	var cur, first *osm.Relation
	flush := func() {
		r := cur
		if r == nil && first != nil {
			r = first
			warns = append(warns, fmt.Sprintf("relation %d has no version as of %s; its earliest stored version %d (%s) is used",
				first.ID, at.Format(time.DateOnly), first.Version, first.Timestamp.Format(time.DateOnly)))
		}
		if r != nil && r.Visible && r.Tags.Find("boundary") == "administrative" {
			out = append(out, r)
		}
		cur, first = nil, nil
	}
	err := st.ScanVersions(ctx, osm.TypeRelation, func(o osm.Object) error {
		r, ok := o.(*osm.Relation)
		if !ok {
			return nil
		}
		if (cur != nil && cur.ID != r.ID) || (first != nil && first.ID != r.ID) {
			flush()
		}
		if first == nil {
			first = r
		}
		if at.IsZero() || !r.Timestamp.After(at) {
			cur = r
		}
		return nil
	})
	if err != nil {
		return nil, nil, fmt.Errorf("admin units: read relations: %w", err)
	}
	flush()
	return out, warns, nil
}

// versionAt returns the version of an object valid at at: the last with a
// timestamp at or before at (any when at is zero), else the earliest with
// early true; nil when the store holds none.
func versionAt(vs []osm.Object, at time.Time) (o osm.Object, early bool) {
	for _, v := range vs {
		if at.IsZero() || !timestamp(v).After(at) {
			o = v
		}
	}
	if o == nil && len(vs) > 0 {
		return vs[0], true
	}
	return o, false
}

func timestamp(o osm.Object) time.Time {
	switch v := o.(type) {
	case *osm.Node:
		return v.Timestamp
	case *osm.Way:
		return v.Timestamp
	case *osm.Relation:
		return v.Timestamp
	}
	return time.Time{}
}

func visible(o osm.Object) bool {
	switch v := o.(type) {
	case *osm.Node:
		return v.Visible
	case *osm.Way:
		return v.Visible
	case *osm.Relation:
		return v.Visible
	}
	return false
}

// assemble builds relation r's polygons from its member ways and their
// nodes as of at. reason is non-empty when it cannot.
func assemble(ctx context.Context, st VersionReader, r *osm.Relation, at time.Time) (orb.MultiPolygon, string, []string, error) {
	m, err := readMembers(ctx, st, r, at)
	if err != nil {
		return nil, "", nil, err
	}
	doc, missingWays, missingNodes, warns := m.doc, m.missingWays, m.missingNodes, m.warns
	switch {
	case len(missingWays) > 0:
		return nil, fmt.Sprintf("member way(s) %s missing from the store or deleted at that time", short(missingWays)), warns, nil
	case len(missingNodes) > 0:
		return nil, fmt.Sprintf("node(s) %s of member ways missing from the store or deleted at that time", short(missingNodes)), warns, nil
	case len(doc.Ways) == 0:
		return nil, "no outer or inner member ways", warns, nil
	}
	rel := *r
	rel.Tags = slices.Clone(r.Tags)
	if t := rel.Tags.Find("type"); t != "boundary" && t != "multipolygon" {
		rel.Tags = append(rel.Tags, osm.Tag{Key: "type", Value: "boundary"})
	}
	doc.Relations = osm.Relations{&rel}
	fc, err := osmgeojson.Convert(doc, osmgeojson.NoMeta(true), osmgeojson.NoRelationMembership(true))
	if err != nil {
		return nil, fmt.Sprintf("osmgeojson: %v", err), warns, nil
	}
	var mp orb.MultiPolygon
	for _, f := range fc.Features {
		if f.Properties["type"] != "relation" {
			continue
		}
		switch g := f.Geometry.(type) {
		case orb.Polygon:
			mp = orb.MultiPolygon{g}
		case orb.MultiPolygon:
			mp = g
		}
	}
	if len(mp) == 0 {
		return nil, "the outer member ways do not join into closed rings" + openEnds(doc, r), warns, nil
	}
	if err := validMultiPolygon(mp); err != nil {
		return nil, err.Error(), warns, nil
	}
	return mp, "", warns, nil
}

// members holds the member ways of a relation and their nodes as of a
// time, and what the store lacks.
type members struct {
	doc                       *osm.OSM
	missingWays, missingNodes []string
	warns                     []string
}

// readMembers reads the outer and inner member ways of r and their nodes,
// each in its version as of at.
func readMembers(ctx context.Context, st VersionReader, r *osm.Relation, at time.Time) (members, error) {
	m := members{doc: &osm.OSM{}}
	seenNode := map[osm.NodeID]bool{}
	for _, mb := range r.Members {
		if mb.Type != osm.TypeWay || (mb.Role != "outer" && mb.Role != "inner") {
			continue
		}
		vs, err := st.ObjectVersions(ctx, osm.TypeWay, mb.Ref)
		if err != nil {
			return m, fmt.Errorf("admin units: relation %d: read way %d: %w", r.ID, mb.Ref, err)
		}
		o, early := versionAt(vs, at)
		if o == nil || !visible(o) {
			m.missingWays = append(m.missingWays, strconv.FormatInt(mb.Ref, 10))
			continue
		}
		if early {
			m.warns = append(m.warns, fmt.Sprintf("relation %d: way %d has no version as of %s; its earliest is used", r.ID, mb.Ref, at.Format(time.DateOnly)))
		}
		w := o.(*osm.Way)
		m.doc.Ways = append(m.doc.Ways, w)
		for _, wn := range w.Nodes {
			if seenNode[wn.ID] {
				continue
			}
			seenNode[wn.ID] = true
			nvs, err := st.ObjectVersions(ctx, osm.TypeNode, int64(wn.ID))
			if err != nil {
				return m, fmt.Errorf("admin units: relation %d: read node %d: %w", r.ID, wn.ID, err)
			}
			if no, _ := versionAt(nvs, at); no != nil && visible(no) {
				m.doc.Nodes = append(m.doc.Nodes, no.(*osm.Node))
			} else {
				m.missingNodes = append(m.missingNodes, strconv.FormatInt(int64(wn.ID), 10))
			}
		}
	}
	return m, nil
}

// openEnds names the way ends that meet no other member way end, the usual
// cause of an unclosed ring.
func openEnds(doc *osm.OSM, r *osm.Relation) string {
	ends := map[osm.NodeID]int{}
	for _, w := range doc.Ways {
		if len(w.Nodes) < 2 {
			continue
		}
		ends[w.Nodes[0].ID]++
		ends[w.Nodes[len(w.Nodes)-1].ID]++
	}
	var open []string
	for id, n := range ends {
		if n%2 == 1 {
			open = append(open, strconv.FormatInt(int64(id), 10))
		}
	}
	if len(open) == 0 {
		return ""
	}
	slices.Sort(open)
	return fmt.Sprintf(" (open ends at node(s) %s)", short(open))
}

// short joins ids, at most five of them.
func short(ids []string) string {
	if len(ids) <= 5 {
		return strings.Join(ids, ", ")
	}
	return fmt.Sprintf("%s and %d more", strings.Join(ids[:5], ", "), len(ids)-5)
}

// withinUnits assembles the containing boundary of spec.Within: relation
// rID, or the boundary relations whose name tag equals it (any level).
func withinUnits(ctx context.Context, st VersionReader, spec AdminSpec, rels []*osm.Relation, at time.Time) (*Units, error) {
	want := func(r *osm.Relation) bool { return strings.EqualFold(r.Tags.Find("name"), spec.Within) }
	if id, err := strconv.ParseInt(strings.TrimPrefix(spec.Within, "r"), 10, 64); err == nil && strings.HasPrefix(spec.Within, "r") {
		want = func(r *osm.Relation) bool { return int64(r.ID) == id }
	}
	u := &Units{source: "within " + spec.Within}
	var fails []RelationFailure
	for _, r := range rels {
		if !want(r) {
			continue
		}
		mp, reason, _, err := assemble(ctx, st, r, at)
		if err != nil {
			return nil, err
		}
		if reason != "" {
			fails = append(fails, RelationFailure{ID: r.ID, Name: r.Tags.Find("name"), Reason: reason})
			continue
		}
		u.polys = append(u.polys, mp)
		u.bounds = append(u.bounds, mp.Bound())
	}
	if len(u.polys) == 0 {
		if len(fails) > 0 {
			return nil, &AssemblyError{Spec: "within=" + spec.Within, Failures: fails}
		}
		return nil, fmt.Errorf("%w: within=%s: no boundary=administrative relation of that name or id in the store", ErrUnits, spec.Within)
	}
	return u, nil
}

// inside reports whether more than half of mp's vertices lie in or on one
// of the container's polygons. Neighbouring boundaries share their common
// edge, so a vertex count rather than strict containment keeps units that
// touch the container's edge and drops neighbours outside it.
func inside(mp orb.MultiPolygon, c *Units) bool {
	in, all := 0, 0
	for _, p := range mp {
		for _, pt := range p[0] {
			all++
			for k, cp := range c.polys {
				if c.bounds[k].Contains(pt) && planar.MultiPolygonContains(cp, pt) {
					in++
					break
				}
			}
		}
	}
	return all > 0 && 2*in > all
}
