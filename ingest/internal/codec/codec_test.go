package codec

import (
	"bytes"
	"reflect"
	"slices"
	"testing"
	"time"

	"github.com/paulmach/osm"
)

func TestVersionRoundTrip(t *testing.T) {
	ts := time.Date(2014, 3, 9, 17, 4, 5, 0, time.UTC)
	cases := []struct {
		name string
		obj  osm.Object
	}{
		{"node with tags", &osm.Node{ID: 42, Version: 3, Visible: true, Timestamp: ts, ChangesetID: 900, UserID: 7, User: "mapper",
			Lat: 38.1234567, Lon: -75.7654321, Tags: osm.Tags{{Key: "amenity", Value: "cafe"}, {Key: "name", Value: "Blue"}}}},
		{"deleted node", &osm.Node{ID: 42, Version: 4, Visible: false, Timestamp: ts.Add(time.Hour), ChangesetID: 901, UserID: 7, User: "mapper"}},
		{"node without tags or user", &osm.Node{ID: 1, Version: 1, Visible: true, Timestamp: ts, Lat: -90, Lon: 180}},
		{"negative id", &osm.Node{ID: -5, Version: 1, Visible: true, Timestamp: ts, Lat: 0.0000001, Lon: -0.0000001}},
		{"unicode", &osm.Node{ID: 8, Version: 2, Visible: true, Timestamp: ts, User: "Zoë Ωmega 北京",
			Tags: osm.Tags{{Key: "name:zh", Value: "北京市"}, {Key: "note", Value: "a\x00b\nc"}, {Key: "", Value: ""}}}},
		{"way", &osm.Way{ID: 6394949, Version: 5, Visible: true, Timestamp: ts, ChangesetID: 1 << 40, UserID: 1,
			Nodes: osm.WayNodes{{ID: 100}, {ID: 99}, {ID: 5000000000}, {ID: 100}}, Tags: osm.Tags{{Key: "highway", Value: "service"}}}},
		{"deleted way", &osm.Way{ID: 3, Version: 2, Visible: false, Timestamp: ts}},
		{"relation with roles", &osm.Relation{ID: 4017808, Version: 9, Visible: true, Timestamp: ts, UserID: 3, User: "u",
			Members: osm.Members{{Type: osm.TypeWay, Ref: 10, Role: "outer"}, {Type: osm.TypeWay, Ref: 9, Role: "inner"},
				{Type: osm.TypeNode, Ref: 77, Role: ""}, {Type: osm.TypeRelation, Ref: 4017808, Role: "subarea"}},
			Tags: osm.Tags{{Key: "type", Value: "multipolygon"}}}},
		{"empty relation", &osm.Relation{ID: 2, Version: 1, Visible: true, Timestamp: ts}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			key := keyOf(tc.obj)
			val, err := AppendVersionValue(nil, tc.obj)
			if err != nil {
				t.Fatal(err)
			}
			got, err := DecodeVersion(key, val)
			if err != nil {
				t.Fatal(err)
			}
			want := normalize(tc.obj)
			if !reflect.DeepEqual(got, want) {
				t.Errorf("round trip:\n got %#v\nwant %#v", got, want)
			}
			// Every truncation must give an error, never a panic.
			for i := range len(val) {
				if _, err := DecodeVersion(key, val[:i]); err == nil {
					t.Errorf("truncated to %d of %d bytes: no error", i, len(val))
				}
			}
		})
	}
}

// keyOf builds the version key of o (osm.ObjectID cannot hold negative ids).
func keyOf(o osm.Object) []byte {
	switch o := o.(type) {
	case *osm.Node:
		return AppendVersionKey(nil, TypeNode, int64(o.ID), o.Version)
	case *osm.Way:
		return AppendVersionKey(nil, TypeWay, int64(o.ID), o.Version)
	case *osm.Relation:
		return AppendVersionKey(nil, TypeRelation, int64(o.ID), o.Version)
	}
	return nil
}

// normalize turns empty slices into nil, as decoding does.
func normalize(o osm.Object) osm.Object {
	switch o := o.(type) {
	case *osm.Node:
		c := *o
		if len(c.Tags) == 0 {
			c.Tags = nil
		}
		return &c
	case *osm.Way:
		c := *o
		if len(c.Tags) == 0 {
			c.Tags = nil
		}
		if len(c.Nodes) == 0 {
			c.Nodes = nil
		}
		return &c
	case *osm.Relation:
		c := *o
		if len(c.Tags) == 0 {
			c.Tags = nil
		}
		if len(c.Members) == 0 {
			c.Members = nil
		}
		return &c
	}
	return o
}

func TestChangesetRoundTrip(t *testing.T) {
	created := time.Date(2016, 3, 1, 10, 0, 0, 0, time.UTC)
	cases := []struct {
		name string
		cs   *osm.Changeset
	}{
		{"closed with bbox", &osm.Changeset{ID: 36947117, User: "mapper", UserID: 1, CreatedAt: created, ClosedAt: created.Add(time.Minute),
			ChangesCount: 12, MinLat: 38.1, MaxLat: 38.2, MinLon: -75.6, MaxLon: -75.5,
			Tags: osm.Tags{{Key: "comment", Value: "fix ñ"}, {Key: "created_by", Value: "JOSM"}}}},
		{"open without bbox or tags", &osm.Changeset{ID: 1, CreatedAt: created, Open: true}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			key := ChangesetKey(int64(tc.cs.ID))
			val := AppendChangesetValue(nil, tc.cs)
			got, err := DecodeChangeset(key, val)
			if err != nil {
				t.Fatal(err)
			}
			if !reflect.DeepEqual(got, tc.cs) {
				t.Errorf("round trip:\n got %#v\nwant %#v", got, tc.cs)
			}
			for i := range len(val) {
				if _, err := DecodeChangeset(key, val[:i]); err == nil {
					t.Errorf("truncated to %d of %d bytes: no error", i, len(val))
				}
			}
		})
	}
}

func TestVersionKeyOrder(t *testing.T) {
	// Keys must sort by id (negative first), then numerically by version.
	type kv struct {
		id  int64
		ver int
	}
	want := []kv{{-9, 1}, {-1, 2}, {0, 1}, {1, 1}, {1, 2}, {1, 10}, {1, 256}, {2, 1}, {1 << 40, 1}}
	keys := make([][]byte, len(want))
	for i, w := range want {
		keys[len(want)-1-i] = AppendVersionKey(nil, TypeNode, w.id, w.ver)
	}
	slices.SortFunc(keys, bytes.Compare)
	for i, k := range keys {
		tb, id, ver, ok := ParseVersionKey(k)
		if !ok || tb != TypeNode || id != want[i].id || ver != want[i].ver {
			t.Errorf("key %d = %c/%d v%d, want n/%d v%d", i, tb, id, ver, want[i].id, want[i].ver)
		}
	}
	if p := ObjectPrefix(TypeNode, 1); !bytes.HasPrefix(AppendVersionKey(nil, TypeNode, 1, 7), p) {
		t.Error("object prefix is not a prefix of its version keys")
	}
}

func TestDecodeCorruptValue(t *testing.T) {
	key := AppendVersionKey(nil, TypeWay, 1, 1)
	cases := map[string][]byte{
		"empty":           {},
		"future encoding": {2, 1, 0, 0, 0, 0, 0, 0},
		"huge count":      {1, 1, 0, 0, 0, 0, 0, 0xff, 0xff, 0xff, 0xff, 0x0f},
		"huge string":     {1, 1, 0, 0, 0, 0xff, 0xff, 0xff, 0xff, 0x0f},
		"overlong varint": {1, 1, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff},
	}
	for name, val := range cases {
		t.Run(name, func(t *testing.T) {
			if _, err := DecodeVersion(key, val); err == nil {
				t.Error("no error")
			}
		})
	}
}
