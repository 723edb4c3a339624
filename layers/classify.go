package layers

import (
	"sort"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geo"
	"github.com/paulmach/osm"
)

// Rules is what the classifier needs from a rule set; *rules.RuleSet meets it.
type Rules interface {
	// Class returns the feature class of a tag set, e.g. "highway=residential"
	// or "building=*", or "" when the tags carry no class.
	Class(tags osm.Tags) string
	// Family returns the key family of a tag key ("other", false when no rule
	// matched) and whether the key is a provenance (bookkeeping) key.
	Family(key string) (family string, provenance bool)
	// Hash identifies the rule set's content; a new hash means re-classifying.
	Hash() string
}

// Locator finds where things were at a moment in history. Classify uses it to
// place ways and relations and to find the way an untagged vertex belongs to.
// Every method answers for the state valid at time at: the last version with a
// timestamp not after at. A nil Locator places nodes only.
type Locator interface {
	// NodeAt returns the position of a node; ok is false when the node is
	// unknown or deleted at that time.
	NodeAt(id osm.NodeID, at time.Time) (p orb.Point, ok bool)
	// WayAt returns the way version valid at that time, nil when none.
	WayAt(id osm.WayID, at time.Time) *osm.Way
	// RelationAt returns the relation version valid at that time, nil when none.
	RelationAt(id osm.RelationID, at time.Time) *osm.Relation
	// WaysHolding returns the visible way versions valid at that time whose
	// node lists hold the node, in way id order.
	WaysHolding(id osm.NodeID, at time.Time) []*osm.Way
}

// maxRelationDepth bounds how deep Classify follows relation members into
// sub-relations when placing a relation. Common practice in OSM tools is a
// small bound because nested relations rarely exceed a few levels.
const maxRelationDepth = 8

// Classify compares one version of an object with its predecessor (prev nil
// for the first version, or when earlier versions are unknown) and returns the
// edit events it makes, following the counting rules documented on Event. prev
// and cur must be the same kind of object (*osm.Node, *osm.Way or
// *osm.Relation); other kinds yield nothing. Classify keeps no reference to its
// arguments and may be called concurrently if loc allows it.
//
// Decisions beyond the counting rules:
//   - tag changes on an object that has no class before or after yield no
//     event (a classless vertex losing import tags is not feature work);
//   - a class regained after having been removed counts as NewFeature again,
//     since only the predecessor is seen;
//   - a classless node that moves and is held by no way yields Geometry
//     (NodeMoved) with Class "";
//   - a classless way or relation whose geometry changes yields Geometry with
//     Class "" (multipolygon rings are often untagged).
func Classify(prev, cur osm.Object, r Rules, loc Locator) []Event {
	switch c := cur.(type) {
	case *osm.Node:
		p, _ := prev.(*osm.Node)
		return classifyNode(p, c, r, loc)
	case *osm.Way:
		p, _ := prev.(*osm.Way)
		return classifyWay(p, c, r, loc)
	case *osm.Relation:
		p, _ := prev.(*osm.Relation)
		return classifyRelation(p, c, r, loc)
	}
	return nil
}

// base fills the fields every event of a version shares.
func base(l Layer, id osm.ObjectID, t time.Time, cs osm.ChangesetID, uid osm.UserID) Event {
	return Event{Layer: l, Time: t.UTC(), Changeset: cs, UID: uid, Object: id}
}

// common handles deletion, new features and tag changes, which every kind of
// object shares. It returns the events so far and whether the version is done
// (no geometry comparison follows).
func common(prevTags, curTags osm.Tags, prevVisible, curVisible, hasPrev bool, ev Event, r Rules) ([]Event, bool) {
	prevClass := ""
	if hasPrev && prevVisible {
		prevClass = r.Class(prevTags)
	}
	if !curVisible {
		if prevClass == "" {
			return nil, true
		}
		e := ev
		e.Layer = Deletion
		e.Class = prevClass
		e.Keys = classKey(prevClass, KeyRemoved, r)
		return []Event{e}, true
	}
	curClass := r.Class(curTags)
	if curClass != "" && prevClass == "" {
		e := ev
		e.Layer = NewFeature
		e.Class = curClass
		e.Keys = classKey(curClass, KeyAdded, r)
		return []Event{e}, true
	}
	if !hasPrev || !prevVisible {
		// first version or undeletion without a class: nothing to compare.
		return nil, true
	}
	if curClass == "" && prevClass == "" {
		return nil, false
	}
	keys, attr := diffTags(prevTags, curTags, r)
	if len(keys) == 0 {
		return nil, false
	}
	e := ev
	e.Class = curClass
	if curClass == "" {
		e.Class = prevClass
	}
	e.Keys = keys
	e.Layer = Bookkeeping
	if attr {
		e.Layer = Attribute
	}
	return []Event{e}, false
}

// classKey returns the touch of a class's key, e.g. "highway" for
// "highway=residential".
func classKey(class string, change KeyChange, r Rules) []KeyTouch {
	k := class
	for i := 0; i < len(class); i++ {
		if class[i] == '=' {
			k = class[:i]
			break
		}
	}
	fam, prov := r.Family(k)
	return []KeyTouch{{Key: k, Family: fam, Change: change, Provenance: prov}}
}

// diffTags lists the keys added, modified or removed between two tag sets,
// sorted by key, and reports whether any of them is not a provenance key.
func diffTags(prev, cur osm.Tags, r Rules) ([]KeyTouch, bool) {
	var out []KeyTouch
	attr := false
	add := func(k string, c KeyChange) {
		fam, prov := r.Family(k)
		out = append(out, KeyTouch{Key: k, Family: fam, Change: c, Provenance: prov})
		attr = attr || !prov
	}
	for _, t := range prev {
		nt := cur.FindTag(t.Key)
		switch {
		case nt == nil:
			add(t.Key, KeyRemoved)
		case nt.Value != t.Value:
			add(t.Key, KeyModified)
		}
	}
	for _, t := range cur {
		if !prev.HasTag(t.Key) {
			add(t.Key, KeyAdded)
		}
	}
	if len(out) > 1 {
		sort.Slice(out, func(i, j int) bool { return out[i].Key < out[j].Key })
	}
	return out, attr
}

func classifyNode(prev, cur *osm.Node, r Rules, loc Locator) []Event {
	if cur == nil {
		return nil
	}
	ev := base(0, cur.ObjectID(), cur.Timestamp, cur.ChangesetID, cur.UserID)
	ev.Location, ev.Located = cur.Point(), true
	if !cur.Visible {
		if prev != nil {
			ev.Location = prev.Point()
		} else {
			ev.Located = false
		}
	}
	out, done := common(tagsOfNode(prev), cur.Tags, prev != nil && prev.Visible, cur.Visible, prev != nil, ev, r)
	if done || prev.Lat == cur.Lat && prev.Lon == cur.Lon {
		return out
	}
	g := ev
	g.Layer = Geometry
	g.Geometry = NodeMoved
	g.Distance = geo.DistanceHaversine(prev.Point(), cur.Point())
	g.Class = r.Class(cur.Tags)
	if g.Class == "" && loc != nil {
		ways := loc.WaysHolding(cur.ID, cur.Timestamp)
		for i, w := range ways {
			if c := r.Class(w.Tags); c != "" || i == len(ways)-1 {
				g.Geometry = WayNodeMoved
				g.Class = c
				break
			}
		}
	}
	return append(out, g)
}

func tagsOfNode(n *osm.Node) osm.Tags {
	if n == nil {
		return nil
	}
	return n.Tags
}

func classifyWay(prev, cur *osm.Way, r Rules, loc Locator) []Event {
	if cur == nil {
		return nil
	}
	ev := base(0, cur.ObjectID(), cur.Timestamp, cur.ChangesetID, cur.UserID)
	var prevTags osm.Tags
	if prev != nil {
		prevTags = prev.Tags
	}
	out, done := common(prevTags, cur.Tags, prev != nil && prev.Visible, cur.Visible, prev != nil, ev, r)
	if !done && !sameWayNodes(prev.Nodes, cur.Nodes) {
		out = withGeometry(out, ev, WayNodesChanged, r.Class(cur.Tags))
	}
	if len(out) == 0 {
		return nil
	}
	var p orb.Point
	var ok bool
	if cur.Visible {
		p, ok, _ = wayCentre(cur.Nodes, cur.Timestamp, loc)
	} else if prev != nil {
		// the way's nodes are often deleted in the same changeset: place the
		// deleted way where its last version stood a second before.
		p, ok, _ = wayCentre(prev.Nodes, cur.Timestamp.Add(-time.Second), loc)
	}
	return placeAll(out, p, ok)
}

func sameWayNodes(a, b osm.WayNodes) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i].ID != b[i].ID {
			return false
		}
	}
	return true
}

func classifyRelation(prev, cur *osm.Relation, r Rules, loc Locator) []Event {
	if cur == nil {
		return nil
	}
	ev := base(0, cur.ObjectID(), cur.Timestamp, cur.ChangesetID, cur.UserID)
	var prevTags osm.Tags
	if prev != nil {
		prevTags = prev.Tags
	}
	out, done := common(prevTags, cur.Tags, prev != nil && prev.Visible, cur.Visible, prev != nil, ev, r)
	if !done && !sameMembers(prev.Members, cur.Members) {
		out = withGeometry(out, ev, MembersChanged, r.Class(cur.Tags))
	}
	if len(out) == 0 {
		return nil
	}
	rel, at := cur, cur.Timestamp
	if !cur.Visible && prev != nil {
		rel, at = prev, cur.Timestamp.Add(-time.Second)
	}
	p, ok := relationPlace(rel, at, loc)
	return placeAll(out, p, ok)
}

func sameMembers(a, b osm.Members) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i].Type != b[i].Type || a[i].Ref != b[i].Ref || a[i].Role != b[i].Role {
			return false
		}
	}
	return true
}

// withGeometry appends a Geometry event of the given kind and class.
func withGeometry(out []Event, ev Event, g GeometryChange, class string) []Event {
	ev.Layer, ev.Geometry, ev.Class = Geometry, g, class
	return append(out, ev)
}

// placeAll gives every event of a version the same location.
func placeAll(out []Event, p orb.Point, ok bool) []Event {
	for i := range out {
		out[i].Location, out[i].Located = p, ok
	}
	return out
}
