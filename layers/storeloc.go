package layers

import (
	"context"
	"encoding/binary"
	"fmt"
	"slices"
	"sync"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// versionCacheSize bounds how many objects' version lists storeLocator keeps.
const versionCacheSize = 1024

// storeLocator is the Locator one classifying goroutine hands to Classify:
// node positions from the pass's node position table, way and relation
// versions read from the Source (the last versionCacheSize objects cached),
// the node→way index shared by the pass. It keeps the first error, which the
// goroutine checks after each Classify call. Not safe for concurrent use: each
// goroutine has its own.
type storeLocator struct {
	ctx    context.Context
	src    Source
	err    error
	misses int64 // NodeAt calls that found no position

	nodes *nodePositions // nil until the node scan is over
	hint  int            // where the last node search ended
	index *nodeWayIndex
	batch int // entries per batch when writing the node→way index

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

// WaysHolding answers from the d|W|node|way index, which it writes on first
// use with one scan over every way version. A history where no classless node
// ever moves (a snapshot) never pays for the index.
func (l *storeLocator) WaysHolding(id osm.NodeID, at time.Time) []*osm.Way {
	if l.err != nil {
		return nil
	}
	if err := l.index.ensure(l.ctx, l.src, l.batch); err != nil {
		l.fail(err)
		return nil
	}
	prefix := binary.BigEndian.AppendUint64(append([]byte(nil), prefixNodeWays...), uint64(id))
	var ids []osm.WayID
	err := l.src.ScanDerived(l.ctx, prefix, func(k, _ []byte) error {
		if len(k) != len(prefix)+8 {
			return fmt.Errorf("%w: node-way index key of %d bytes", ErrCorrupt, len(k))
		}
		ids = append(ids, osm.WayID(binary.BigEndian.Uint64(k[len(prefix):])))
		return nil
	})
	if err != nil {
		l.fail(fmt.Errorf("ways holding node/%d: %w", id, err))
		return nil
	}
	var out []*osm.Way
	for _, wid := range ids {
		w := l.WayAt(wid, at)
		if w == nil || !w.Visible {
			continue
		}
		if slices.ContainsFunc(w.Nodes, func(wn osm.WayNode) bool { return wn.ID == id }) {
			out = append(out, w)
		}
	}
	return out
}

// nodeWayIndex records whether the d|W| node→way index has been written in
// this pass; the classifying goroutines share it.
type nodeWayIndex struct {
	mu    sync.Mutex
	built bool
}

// ensure writes the index unless it has been written; other callers wait.
func (x *nodeWayIndex) ensure(ctx context.Context, src Source, batch int) error {
	x.mu.Lock()
	defer x.mu.Unlock()
	if x.built {
		return nil
	}
	if err := buildNodeWays(ctx, src, batch); err != nil {
		return err
	}
	x.built = true
	return nil
}

// buildNodeWays writes d|W|node|way for every node any way version ever held,
// batch by batch, so memory stays bounded by the batch size.
func buildNodeWays(ctx context.Context, src Source, batch int) error {
	keys := make([][16]byte, 0, batch)
	write := func() error {
		if err := ctx.Err(); err != nil {
			return err
		}
		err := src.PutDerived(ctx, func(put func(k, v []byte) error) error {
			k := make([]byte, 0, len(prefixNodeWays)+16)
			for _, nw := range keys {
				k = append(append(k[:0], prefixNodeWays...), nw[:]...)
				if err := put(k, nil); err != nil {
					return err
				}
			}
			return nil
		})
		keys = keys[:0]
		return err
	}
	err := src.ScanVersions(ctx, osm.TypeWay, func(o osm.Object) error {
		w, ok := o.(*osm.Way)
		if !ok {
			return nil
		}
		for _, wn := range w.Nodes {
			var nw [16]byte
			binary.BigEndian.PutUint64(nw[:8], uint64(wn.ID))
			binary.BigEndian.PutUint64(nw[8:], uint64(w.ID))
			keys = append(keys, nw)
			if len(keys) == cap(keys) {
				if err := write(); err != nil {
					return err
				}
			}
		}
		return nil
	})
	if err == nil {
		err = write()
	}
	if err != nil {
		return fmt.Errorf("node-way index: %w", err)
	}
	return nil
}
