package layers

import (
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/planar"
	"github.com/paulmach/osm"
)

// wayCentre returns the centroid of the positions its nodes had at time at,
// and how many of the nodes could not be placed. ok is false when none could.
func wayCentre(nodes osm.WayNodes, at time.Time, loc Locator) (p orb.Point, ok bool, missing int) {
	if loc == nil {
		return orb.Point{}, false, len(nodes)
	}
	pts := make(orb.MultiPoint, 0, len(nodes))
	for i, wn := range nodes {
		// a closed way repeats its first node; counting it twice would pull
		// the centre towards it.
		if i > 0 && i == len(nodes)-1 && wn.ID == nodes[0].ID {
			break
		}
		q, found := loc.NodeAt(wn.ID, at)
		if !found {
			missing++
			continue
		}
		pts = append(pts, q)
	}
	if len(pts) == 0 {
		return orb.Point{}, false, missing
	}
	c, _ := planar.CentroidArea(pts)
	return c, true, missing
}

// relationPlace returns the position of a relation's first member that can be
// placed: a node's position or a way's centre, following sub-relations depth
// first up to maxRelationDepth levels. Each relation is entered at most once
// (self-references, cycles and shared sub-relations are skipped), so the walk
// ends and its work is bounded by the number of distinct relations reached.
func relationPlace(r *osm.Relation, at time.Time, loc Locator) (orb.Point, bool) {
	if loc == nil || r == nil {
		return orb.Point{}, false
	}
	seen := map[osm.RelationID]bool{r.ID: true}
	return memberPlace(r.Members, at, loc, seen, 1)
}

func memberPlace(ms osm.Members, at time.Time, loc Locator, seen map[osm.RelationID]bool, depth int) (orb.Point, bool) {
	for _, m := range ms {
		switch m.Type {
		case osm.TypeNode:
			if p, ok := loc.NodeAt(osm.NodeID(m.Ref), at); ok {
				return p, true
			}
		case osm.TypeWay:
			w := loc.WayAt(osm.WayID(m.Ref), at)
			if w == nil || !w.Visible {
				continue
			}
			if p, ok, _ := wayCentre(w.Nodes, at, loc); ok {
				return p, true
			}
		case osm.TypeRelation:
			id := osm.RelationID(m.Ref)
			if depth >= maxRelationDepth || seen[id] {
				continue
			}
			sub := loc.RelationAt(id, at)
			if sub == nil || !sub.Visible {
				continue
			}
			seen[id] = true
			if p, ok := memberPlace(sub.Members, at, loc, seen, depth+1); ok {
				return p, true
			}
		}
	}
	return orb.Point{}, false
}
