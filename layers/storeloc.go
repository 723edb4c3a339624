package layers

import (
	"context"
	"fmt"
	"slices"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// versionCacheSize bounds how many objects' version lists storeLocator keeps.
const versionCacheSize = 1024

// storeLocator is the Locator one classifying goroutine hands to Classify:
// node positions from the pass's node position table, way and relation
// versions read from the Source (the last versionCacheSize objects cached),
// the node→way table shared by the pass. It keeps the first error, which the
// goroutine checks after each Classify call. Not safe for concurrent use: each
// goroutine has its own.
type storeLocator struct {
	ctx    context.Context
	src    Source
	err    error
	misses int64 // NodeAt calls that found no position

	nodes   *nodePositions // nil until the node scan is over
	hint    int            // where the last node search ended
	index   *nodeWayIndex
	wayHint int // where the last node→way search ended

	ways map[osm.WayID][]osm.Object
	rels map[osm.RelationID][]osm.Object
}

func (l *storeLocator) fail(err error) {
	if l.err == nil {
		l.err = err
	}
}

func (l *storeLocator) NodeAt(id osm.NodeID, at time.Time) (orb.Point, bool) {
	if l.err != nil {
		return orb.Point{}, false
	}
	p, ok := l.nodes.at(id, at, &l.hint)
	if !ok {
		l.misses++
	}
	return p, ok
}

// versionAt returns the last version with a timestamp not after at.
func versionAt(vs []osm.Object, at time.Time) osm.Object {
	var out osm.Object
	for _, o := range vs {
		if _, ts := editor(o); ts.After(at) {
			break
		}
		out = o
	}
	return out
}

func (l *storeLocator) versions(t osm.Type, id int64) []osm.Object {
	if l.err != nil {
		return nil
	}
	vs, err := l.src.ObjectVersions(l.ctx, t, id)
	if err != nil {
		l.fail(fmt.Errorf("versions of %s/%d: %w", t, id, err))
		return nil
	}
	return vs
}

func (l *storeLocator) WayAt(id osm.WayID, at time.Time) *osm.Way {
	vs, ok := l.ways[id]
	if !ok {
		if l.ways == nil || len(l.ways) >= versionCacheSize {
			l.ways = make(map[osm.WayID][]osm.Object)
		}
		vs = l.versions(osm.TypeWay, int64(id))
		l.ways[id] = vs
	}
	w, _ := versionAt(vs, at).(*osm.Way)
	return w
}

func (l *storeLocator) RelationAt(id osm.RelationID, at time.Time) *osm.Relation {
	vs, ok := l.rels[id]
	if !ok {
		if l.rels == nil || len(l.rels) >= versionCacheSize {
			l.rels = make(map[osm.RelationID][]osm.Object)
		}
		vs = l.versions(osm.TypeRelation, int64(id))
		l.rels[id] = vs
	}
	r, _ := versionAt(vs, at).(*osm.Relation)
	return r
}

// WaysHolding answers from the node→way table, which the pass builds on
// first use with one scan over every way version. A history where no
// classless node ever moves (a snapshot) never pays for it.
func (l *storeLocator) WaysHolding(id osm.NodeID, at time.Time) []*osm.Way {
	if l.err != nil {
		return nil
	}
	tab, err := l.index.get(l.ctx, l.src)
	if err != nil {
		l.fail(fmt.Errorf("ways holding node/%d: %w", id, err))
		return nil
	}
	var out []*osm.Way
	tab.ways(id, &l.wayHint, func(wid osm.WayID) {
		w := l.WayAt(wid, at)
		if w == nil || !w.Visible {
			return
		}
		if slices.ContainsFunc(w.Nodes, func(wn osm.WayNode) bool { return wn.ID == id }) {
			out = append(out, w)
		}
	})
	return out
}
