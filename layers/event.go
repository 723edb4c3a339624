package layers

import (
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// Layer is the part of the map an edit worked on.
type Layer uint8

// The layers an edit event can fall into.
const (
	Geometry   Layer = iota + 1 // positions, way node lists, relation members
	Attribute                   // tag keys added, changed or removed on an existing feature
	NewFeature                  // first version that carries a feature class
	Deletion                    // visible=false on a feature
	// Bookkeeping records versions that touched only provenance keys (source, note,
	// created_by, import bookkeeping prefixes). It is reported apart and never
	// counts as attribute work; it is not in Layers.
	Bookkeeping
)

// Layers lists every layer in a stable order.
var Layers = [...]Layer{Geometry, Attribute, NewFeature, Deletion}

// String returns the layer's name as used in rules, CSV and JSON.
func (l Layer) String() string {
	switch l {
	case Geometry:
		return "geometry"
	case Attribute:
		return "attribute"
	case NewFeature:
		return "new_feature"
	case Deletion:
		return "deletion"
	case Bookkeeping:
		return "bookkeeping"
	}
	return "unknown"
}

// ParseLayer returns the layer with the given name.
func ParseLayer(s string) (Layer, bool) {
	for _, l := range Layers {
		if l.String() == s {
			return l, true
		}
	}
	return 0, false
}

// KeyChange is what happened to one tag key between two versions.
type KeyChange uint8

// The kinds of change to a tag key.
const (
	KeyAdded KeyChange = iota + 1
	KeyModified
	KeyRemoved
)

// String returns "added", "modified" or "removed".
func (c KeyChange) String() string {
	switch c {
	case KeyAdded:
		return "added"
	case KeyModified:
		return "modified"
	case KeyRemoved:
		return "removed"
	}
	return "unknown"
}

// GeometryChange tells which kind of geometry edit an event records.
type GeometryChange uint8

// The kinds of geometry edit.
const (
	NodeMoved       GeometryChange = iota + 1 // a node's position changed
	WayNodesChanged                           // a way's node list changed
	MembersChanged                            // a relation's member list changed
	WayNodeMoved                              // an untagged way node moved; counted for its way's class
)

// KeyTouch is one tag key an event touched.
type KeyTouch struct {
	Key        string
	Family     string // key family from the rules, "other" when none matched
	Change     KeyChange
	Provenance bool // bookkeeping key (source, note, created_by, ...): never attribute work
}

// Event is one classified edit: a version compared with its predecessor.
//
// Counting rules every producer and consumer keeps:
//   - a version yields at most one event per layer; an attribute event lists every
//     key it touched (attribute keys and, flagged, provenance keys);
//   - a version that touched only provenance keys yields one Bookkeeping event;
//   - NewFeature is the first version that carries a class (version 1 or later);
//     that version yields no Geometry or Attribute event;
//   - Deletion only for objects that had a class; untagged vertices yield none;
//   - an untagged way node that moves yields one Geometry event (WayNodeMoved)
//     with the class of a way holding it at that time; a node with a class that
//     moves yields Geometry (NodeMoved) with its own class;
//   - creating an untagged node yields nothing; the way version that takes it in
//     yields Geometry (WayNodesChanged).
type Event struct {
	Layer     Layer
	Time      time.Time
	Changeset osm.ChangesetID
	UID       osm.UserID
	Object    osm.ObjectID // type, id and version of the version that made the edit
	Class     string       // feature class, e.g. "highway=residential" or "building=*"; "" when none
	Keys      []KeyTouch   // attribute and provenance keys touched (attribute layer), or the class key
	Geometry  GeometryChange
	Distance  float64   // metres a node moved (NodeMoved, WayNodeMoved), else 0
	Location  orb.Point // lon, lat
	Located   bool      // false when no position could be found
}

// Feature returns the object the event belongs to, without its version.
func (e *Event) Feature() osm.FeatureID {
	switch e.Object.Type() {
	case osm.TypeNode:
		return osm.NodeID(e.Object.Ref()).FeatureID()
	case osm.TypeWay:
		return osm.WayID(e.Object.Ref()).FeatureID()
	}
	return osm.RelationID(e.Object.Ref()).FeatureID()
}
