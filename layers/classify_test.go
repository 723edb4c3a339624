package layers

import (
	"context"
	"errors"
	"testing"
	"time"

	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// TestClassifyCases covers the counting rules on Event one at a time. The
// versions are taken from real histories (osm module testdata, cited per case)
// where one shows the rule, and otherwise are minimal structural fixtures.
func TestClassifyCases(t *testing.T) {
	r := rules.Default()
	t0 := ts("2013-07-18T23:19:26Z")
	node := func(v int, lat, lon float64, visible bool, tags ...string) *osm.Node {
		n := &osm.Node{ID: 2389008483, Version: v, Visible: visible, Lat: lat, Lon: lon, Timestamp: t0.Add(time.Duration(v) * time.Hour)}
		for i := 0; i+1 < len(tags); i += 2 {
			n.Tags = append(n.Tags, osm.Tag{Key: tags[i], Value: tags[i+1]})
		}
		return n
	}
	type ev struct {
		layer Layer
		geom  GeometryChange
		class string
		keys  int
	}
	cases := []struct {
		name      string
		prev, cur osm.Object
		want      []ev
	}{
		// way_230391153.osm: node 2389008483 v3 → v4 (2016-07-26) gains
		// highway=crossing at the same position: a new feature at version 4.
		{"class gained at v4", node(3, 37.8052155, -122.2705774, true), node(4, 37.8052155, -122.2705774, true, "highway", "crossing"),
			[]ev{{NewFeature, 0, "highway=crossing", 1}}},
		{"untagged node created", nil, node(1, 37.8052155, -122.2705774, true), nil},
		{"untagged node deleted", node(1, 1, 1, true), node(2, 0, 0, false), nil},
		{"classed node deleted", node(1, 1, 1, true, "amenity", "bench"), node(2, 0, 0, false),
			[]ev{{Deletion, 0, "amenity=bench", 1}}},
		{"class value changed", node(1, 1, 1, true, "amenity", "bench"), node(2, 1, 1, true, "amenity", "waste_basket"),
			[]ev{{Attribute, 0, "amenity=waste_basket", 1}}},
		{"class removed, name kept", node(1, 1, 1, true, "amenity", "bench", "name", "x"), node(2, 1, 1, true, "name", "x"),
			[]ev{{Attribute, 0, "amenity=bench", 1}}},
		{"moved and renamed", node(1, 1, 1, true, "amenity", "bench"), node(2, 1.001, 1, true, "amenity", "bench", "name", "x"),
			[]ev{{Attribute, 0, "amenity=bench", 1}, {Geometry, NodeMoved, "amenity=bench", 0}}},
		{"source only", node(1, 1, 1, true, "amenity", "bench"), node(2, 1, 1, true, "amenity", "bench", "source", "survey"),
			[]ev{{Bookkeeping, 0, "amenity=bench", 1}}},
		{"source and name", node(1, 1, 1, true, "amenity", "bench"), node(2, 1, 1, true, "amenity", "bench", "source", "survey", "name", "x"),
			[]ev{{Attribute, 0, "amenity=bench", 2}}},
		{"untagged node moved, no way", node(1, 1, 1, true), node(2, 1.001, 1, true),
			[]ev{{Geometry, NodeMoved, "", 0}}},
		{"classless tags changed", node(1, 1, 1, true, "source", "a"), node(2, 1, 1, true, "source", "b", "fixme", "x"), nil},
		{"undeleted with class", node(2, 0, 0, false), node(3, 1, 1, true, "amenity", "bench"),
			[]ev{{NewFeature, 0, "amenity=bench", 1}}},
		{"way nodes reordered",
			&osm.Way{ID: 5, Version: 1, Visible: true, Nodes: osm.WayNodes{{ID: 1}, {ID: 2}}, Tags: osm.Tags{{Key: "building", Value: "yes"}}},
			&osm.Way{ID: 5, Version: 2, Visible: true, Nodes: osm.WayNodes{{ID: 2}, {ID: 1}}, Tags: osm.Tags{{Key: "building", Value: "yes"}}},
			[]ev{{Geometry, WayNodesChanged, "building=*", 0}}},
		{"untagged way takes a node",
			&osm.Way{ID: 5, Version: 1, Visible: true, Nodes: osm.WayNodes{{ID: 1}, {ID: 2}}},
			&osm.Way{ID: 5, Version: 2, Visible: true, Nodes: osm.WayNodes{{ID: 1}, {ID: 3}, {ID: 2}}},
			[]ev{{Geometry, WayNodesChanged, "", 0}}},
		{"relation member role changed",
			&osm.Relation{ID: 9, Version: 1, Visible: true, Members: osm.Members{{Type: osm.TypeWay, Ref: 5, Role: "outer"}}, Tags: osm.Tags{{Key: "building", Value: "yes"}, {Key: "type", Value: "multipolygon"}}},
			&osm.Relation{ID: 9, Version: 2, Visible: true, Members: osm.Members{{Type: osm.TypeWay, Ref: 5, Role: "inner"}}, Tags: osm.Tags{{Key: "building", Value: "yes"}, {Key: "type", Value: "multipolygon"}}},
			[]ev{{Geometry, MembersChanged, "building=*", 0}}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := Classify(c.prev, c.cur, r, nil)
			if len(got) != len(c.want) {
				t.Fatalf("got %d events %+v, want %d", len(got), got, len(c.want))
			}
			for i, w := range c.want {
				g := got[i]
				if g.Layer != w.layer || g.Geometry != w.geom || g.Class != w.class || len(g.Keys) != w.keys {
					t.Errorf("event %d = %s geom %d class %q keys %+v; want %s geom %d class %q %d keys",
						i, g.Layer, g.Geometry, g.Class, g.Keys, w.layer, w.geom, w.class, w.keys)
				}
				if g.Object != c.cur.ObjectID() {
					t.Errorf("event %d object %s, want %s", i, g.Object, c.cur.ObjectID())
				}
			}
		})
	}
}

// countingLocator wraps a memSource and counts lookups, to show placing a
// relation stays bounded.
type countingLocator struct {
	src   *memSource
	calls int
}

func (l *countingLocator) NodeAt(id osm.NodeID, at time.Time) (orb.Point, bool) {
	l.calls++
	p, ok, _ := l.src.NodeAt(context.Background(), id, at)
	return p, ok
}

func (l *countingLocator) WayAt(id osm.WayID, at time.Time) *osm.Way {
	l.calls++
	vs, _ := l.src.ObjectVersions(context.Background(), osm.TypeWay, int64(id))
	w, _ := versionAt(vs, at).(*osm.Way)
	return w
}

func (l *countingLocator) RelationAt(id osm.RelationID, at time.Time) *osm.Relation {
	l.calls++
	vs, _ := l.src.ObjectVersions(context.Background(), osm.TypeRelation, int64(id))
	r, _ := versionAt(vs, at).(*osm.Relation)
	return r
}

func (l *countingLocator) WaysHolding(osm.NodeID, time.Time) []*osm.Way { return nil }

// TestRelationCycles: bad input must end. A relation holding itself, a ring
// of relations, and a deep chain are placed within bounded work; a position
// deeper than maxRelationDepth is not reached.
func TestRelationCycles(t *testing.T) {
	t0 := ts("2020-01-01T00:00:00Z")
	rel := func(id int64, members ...osm.Member) *osm.Relation {
		return &osm.Relation{ID: osm.RelationID(id), Version: 1, Visible: true, Timestamp: t0, Members: members,
			Tags: osm.Tags{{Key: "boundary", Value: "administrative"}}}
	}
	sub := func(id int64) osm.Member { return osm.Member{Type: osm.TypeRelation, Ref: id} }
	nodeM := osm.Member{Type: osm.TypeNode, Ref: 7}
	n7 := &osm.Node{ID: 7, Version: 1, Visible: true, Lat: 1, Lon: 2, Timestamp: t0}

	chain := func(n int, last osm.Member, loop bool) []osm.Object {
		var out []osm.Object
		for i := 1; i <= n; i++ {
			next := sub(int64(i + 1))
			if i == n {
				next = last
				if loop {
					next = sub(1)
				}
			}
			out = append(out, rel(int64(i), sub(int64(i)), next))
		}
		return out
	}
	cases := []struct {
		name    string
		objs    []osm.Object
		located bool
	}{
		{"self reference then node", []osm.Object{rel(1, sub(1), nodeM), n7}, true},
		{"ring of 50", chain(50, nodeM, true), false},
		{"chain reaching a node at depth 5", append(chain(5, nodeM, false), n7), true},
		{"chain reaching a node at depth 40", append(chain(40, nodeM, false), n7), false},
		{"missing members", []osm.Object{rel(1, sub(99), osm.Member{Type: osm.TypeWay, Ref: 98}, osm.Member{Type: osm.TypeNode, Ref: 97})}, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			src := newMemSource(t, c.objs...)
			loc := &countingLocator{src: src}
			first := c.objs[0].(*osm.Relation)
			evs := Classify(nil, first, rules.Default(), loc)
			if len(evs) != 1 || evs[0].Located != c.located {
				t.Fatalf("events %+v, want one new_feature located=%v", evs, c.located)
			}
			if loc.calls > 4*maxRelationDepth {
				t.Errorf("%d lookups to place one relation", loc.calls)
			}
			if c.located && evs[0].Location != (orb.Point{2, 1}) {
				t.Errorf("placed at %v, want node 7 at [2 1]", evs[0].Location)
			}
		})
	}
}

// TestWayMissingNodes: a way whose nodes are absent from the store (the usual
// state of a clipped extract) gives events without location and is counted,
// with no error. Way 6394949's history (osm module testdata) without its
// nodes.
func TestWayMissingNodes(t *testing.T) {
	var ways []osm.Object
	for _, o := range readOSMXML(t, osmTestdata(t, "annotate/testdata/way_6394949.osm")) {
		if o.ObjectID().Type() == osm.TypeWay {
			ways = append(ways, o)
		}
	}
	src := newMemSource(t, ways...)
	sum := runPass(t, src)
	// Versions 1, 2, 3 and 5 yield events (see TestWay6394949History).
	if sum.WaysMissingNodes != 4 || sum.Unlocated != 6 {
		t.Errorf("ways missing nodes %d, unlocated %d; want 4 and 6", sum.WaysMissingNodes, sum.Unlocated)
	}
	for _, e := range eventsOf(t, src, func(*Event) bool { return true }) {
		if e.Located {
			t.Errorf("%s %s located without nodes", e.Object, e.Layer)
		}
	}
}

// TestEventEncoding round-trips events through the stored encoding and checks
// that truncated values give ErrCorrupt, never a panic.
func TestEventEncoding(t *testing.T) {
	e := Event{
		Layer: Attribute, Time: ts("2016-07-26T15:28:31Z"), Changeset: 41040656, UID: 381909,
		Object: osm.NodeID(2389008483).ObjectID(4), Class: "highway=crossing",
		Keys: []KeyTouch{{Key: "crossing", Family: "other", Change: KeyAdded},
			{Key: "source", Family: "provenance", Change: KeyRemoved, Provenance: true}},
		Geometry: NodeMoved, Distance: 1.25, Location: orb.Point{-122.2705774, 37.8052155}, Located: true,
	}
	k := eventKey(nil, &e)
	v := encodeValue(nil, &e)
	var got Event
	if err := decodeEvent(k, v, &got); err != nil {
		t.Fatal(err)
	}
	if got.Layer != e.Layer || !got.Time.Equal(e.Time) || got.Changeset != e.Changeset || got.UID != e.UID ||
		got.Object != e.Object || got.Class != e.Class || got.Geometry != e.Geometry || got.Distance != e.Distance ||
		got.Location != e.Location || !got.Located || len(got.Keys) != 2 || got.Keys[0] != e.Keys[0] || got.Keys[1] != e.Keys[1] {
		t.Errorf("round trip:\n got %+v\nwant %+v", got, e)
	}
	for n := 0; n < len(v); n++ {
		if err := decodeEvent(k, v[:n], &got); !errors.Is(err, ErrCorrupt) {
			t.Errorf("value cut to %d bytes: err %v, want ErrCorrupt", n, err)
		}
	}
	if err := decodeEvent(k[:10], v, &got); !errors.Is(err, ErrCorrupt) {
		t.Errorf("short key: err %v, want ErrCorrupt", err)
	}
	// Times before 1970 keep their order in keys.
	a, b := Event{Time: ts("1969-12-31T23:59:59Z")}, Event{Time: ts("1970-01-01T00:00:01Z")}
	if timeKey(a.Time) >= timeKey(b.Time) || !keyTime(timeKey(a.Time)).Equal(a.Time) {
		t.Error("time keys do not keep order across 1970")
	}
}

// FuzzDecodeEvent: no value crashes the decoder.
func FuzzDecodeEvent(f *testing.F) {
	e := Event{Layer: NewFeature, Time: ts("2016-07-26T15:28:31Z"), Object: osm.WayID(1).ObjectID(1), Class: "building=*",
		Keys: []KeyTouch{{Key: "building", Family: "other", Change: KeyAdded}}, Located: true}
	f.Add(encodeValue(nil, &e))
	k := eventKey(nil, &e)
	f.Fuzz(func(t *testing.T, v []byte) {
		var got Event
		_ = decodeEvent(k, v, &got)
	})
}
