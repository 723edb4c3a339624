package osmfile

import (
	"bytes"
	"path/filepath"
	"testing"
	"time"

	"github.com/paulmach/osm"
)

// TestXMLCounts reads each XML fixture and checks how many versions of each
// type it yields. Expected values:
//   - nodes, ways, relations: `osmium fileinfo -e FILE` (Debian osmium-tool
//     1.15.0, libosmium 2.19.0), lines "Number of nodes/ways/relations"; osmium
//     counts every version of an object.
//   - invisible: `osmium cat FILE -f opl | grep -c ' dD'` (same osmium), the
//     versions osmium reads as deleted.
//   - create/modify/delete: Python 3.11 xml.etree.ElementTree, counting the
//     children of each <create>/<modify>/<delete> block.
//   - changesets: `osmium fileinfo -e` "Number of changesets".
func TestXMLCounts(t *testing.T) {
	tests := []struct {
		file   string
		format Format
		want   counts
	}{
		// osmium: nodes 33, ways 5, relations 0; dD 0
		{"way_6394949.osm", FormatXML, counts{Nodes: 33, Ways: 5}},
		// osmium: nodes 21, ways 1, relations 0; dD 0
		{"way_230391153.osm", FormatXML, counts{Nodes: 21, Ways: 1}},
		// osmium: nodes 2063, ways 430, relations 17; dD 64 (also grep -c 'visible="false"' = 64)
		{"relation_4017808.osm", FormatXML, counts{Nodes: 2063, Ways: 430, Relations: 17, Invisible: 64}},
		// osmium: nodes 151, ways 43; dD 1; ElementTree: create 174, modify 19, delete 1
		{"minute_871.osc", FormatOsmChange, counts{Nodes: 151, Ways: 43, Invisible: 1, Create: 174, Modify: 19, Delete: 1}},
		// osmium: ways 2, relations 16; dD 0; ElementTree: create 3, modify 15
		{"changeset_38162206.osc", FormatOsmChange, counts{Ways: 2, Relations: 16, Create: 3, Modify: 15}},
		// osmium: nodes 244, ways 23; dD 0; ElementTree: create 206, modify 61
		{"changeset_38162210.osc", FormatOsmChange, counts{Nodes: 244, Ways: 23, Create: 206, Modify: 61}},
		// osmium: Number of changesets: 2
		{"changesets_36947117.osm", FormatChangesets, counts{Changesets: 2}},
	}
	for _, tt := range tests {
		t.Run(tt.file, func(t *testing.T) {
			format, items := mustReadAll(t, filepath.Join("..", "testdata", tt.file))
			if format != tt.format {
				t.Errorf("format %v, want %v", format, tt.format)
			}
			if got := countItems(items); got != tt.want {
				t.Errorf("counts\n got %+v\nwant %+v", got, tt.want)
			}
			for i, it := range items {
				if want := int64(i + 1); it.Pos.Element != want {
					t.Fatalf("item %d: element %d, want %d", i, it.Pos.Element, want)
				}
				if it.Pos.Line == 0 || it.Pos.Offset == 0 {
					t.Fatalf("item %d: position %v without line or offset", i, it.Pos)
				}
			}
		})
	}
}

// TestXMLFirstObject checks the fields and position of the first object of a
// history fixture against the file itself (`head -2 way_6394949.osm`):
//
//	<node id="305541874" lat="37.8191887" lon="-122.2263618" user="Michal Migurski" uid="25981"
//	 visible="true" version="1" changeset="442821" timestamp="2008-10-19T02:20:15Z"></node>
//
// on line 2 after one space, at 0-based byte 40 (`head -1 way_6394949.osm | wc -c` = 39).
func TestXMLFirstObject(t *testing.T) {
	_, items := mustReadAll(t, "../testdata/way_6394949.osm")
	it := items[0]
	n, ok := it.Object.(*osm.Node)
	if !ok {
		t.Fatalf("first object %T, want *osm.Node", it.Object)
	}
	want := osm.Node{ID: 305541874, Lat: 37.8191887, Lon: -122.2263618, User: "Michal Migurski", UserID: 25981,
		Visible: true, Version: 1, ChangesetID: 442821, Timestamp: time.Date(2008, 10, 19, 2, 20, 15, 0, time.UTC)}
	if n.ID != want.ID || n.Lat != want.Lat || n.Lon != want.Lon || n.User != want.User || n.UserID != want.UserID ||
		n.Visible != want.Visible || n.Version != want.Version || n.ChangesetID != want.ChangesetID || !n.Timestamp.Equal(want.Timestamp) {
		t.Errorf("first node\n got %+v\nwant %+v", *n, want)
	}
	if p := (Position{Offset: 40, Line: 2, Column: 2, Element: 1}); it.Pos != p {
		t.Errorf("position %+v, want %+v", it.Pos, p)
	}
}

// TestXMLVisibleDefault checks that a missing visible attribute reads as
// visible (OSM XML as the API writes snapshots, common practice): the history
// fixture with every visible="true" removed must read the same as the
// original, and the 64 visible="false" versions stay deleted.
func TestXMLVisibleDefault(t *testing.T) {
	src := readFile(t, "../testdata/relation_4017808.osm")
	stripped := bytes.ReplaceAll(src, []byte(` visible="true"`), nil)
	if bytes.Equal(src, stripped) {
		t.Fatal("fixture has no visible=\"true\" to strip")
	}
	_, want := mustReadAll(t, "../testdata/relation_4017808.osm")
	_, got := mustReadAll(t, writeTemp(t, "stripped.osm", stripped))
	if len(got) != len(want) {
		t.Fatalf("%d items, want %d", len(got), len(want))
	}
	for i := range got {
		if g, w := visibleOf(got[i].Object), visibleOf(want[i].Object); g != w {
			t.Fatalf("item %d (%s): visible %v, want %v", i, objectLabelOf(want[i].Object), g, w)
		}
	}
	if c := countItems(got); c.Invisible != 64 { // grep -c 'visible="false"' relation_4017808.osm
		t.Errorf("%d invisible versions, want 64", c.Invisible)
	}
}

func visibleOf(o osm.Object) bool {
	switch o := o.(type) {
	case *osm.Node:
		return o.Visible
	case *osm.Way:
		return o.Visible
	case *osm.Relation:
		return o.Visible
	}
	return false
}

// TestOsmChangeDelete checks the one object of the delete block of
// minute_871.osc (lines 9-11 of the file):
//
//	<delete>
//	  <node id="665036299" version="2" timestamp="2016-07-19T05:46:35Z" ... changeset="40848253" .../>
func TestOsmChangeDelete(t *testing.T) {
	_, items := mustReadAll(t, "../testdata/minute_871.osc")
	var deleted []Item
	for _, it := range items {
		if it.Action == ActionDelete {
			deleted = append(deleted, it)
		}
		if (it.Action == ActionDelete) == visibleOf(it.Object) {
			t.Errorf("%s in action %d has visible %v", objectLabelOf(it.Object), it.Action, visibleOf(it.Object))
		}
	}
	if len(deleted) != 1 {
		t.Fatalf("%d deleted objects, want 1", len(deleted))
	}
	n, ok := deleted[0].Object.(*osm.Node)
	if !ok || n.ID != 665036299 || n.Version != 2 || n.ChangesetID != 40848253 {
		t.Errorf("deleted object %+v, want node/665036299 v2 in changeset 40848253", deleted[0].Object)
	}
	if deleted[0].Pos.Line != 10 {
		t.Errorf("deleted object on line %d, want 10", deleted[0].Pos.Line)
	}
}

// TestChangesetMetadata checks the changesets of changesets_36947117.osm,
// real changeset metadata as the OSM replication scripts write it (copied from
// github.com/paulmach/osm v0.8.0 changeset_test.go); the values are those of
// the file's first <changeset> element.
func TestChangesetMetadata(t *testing.T) {
	for _, name := range []string{"changesets_36947117.osm", "changesets_36947117.osm.gz", "changesets_36947117.osm.bz2"} {
		t.Run(name, func(t *testing.T) {
			_, items := mustReadAll(t, filepath.Join("..", "testdata", name))
			if len(items) != 2 {
				t.Fatalf("%d items, want 2", len(items))
			}
			c := items[0].Changeset
			if c == nil {
				t.Fatalf("first item %+v is no changeset", items[0])
			}
			checks := []struct {
				what      string
				got, want any
			}{
				{"id", c.ID, osm.ChangesetID(36947117)},
				{"created_at", c.CreatedAt, time.Date(2016, 2, 1, 21, 57, 17, 0, time.UTC)},
				{"closed_at", c.ClosedAt, time.Date(2016, 2, 1, 23, 5, 55, 0, time.UTC)},
				{"open", c.Open, true},
				{"num_changes", c.ChangesCount, 86},
				{"user", c.User, "padvinder"},
				{"uid", c.UserID, osm.UserID(978786)},
				{"min_lat", c.MinLat, 52.7016394},
				{"max_lat", c.MaxLat, 52.7236643},
				{"min_lon", c.MinLon, 5.1545597},
				{"max_lon", c.MaxLon, 5.2532961},
				{"created_by", c.Tags.Find("created_by"), "Potlatch 2"},
				{"tags", len(c.Tags), 3},
				{"second open", items[1].Changeset.Open, false},
			}
			for _, ck := range checks {
				if g, ok := ck.got.(time.Time); ok {
					if !g.Equal(ck.want.(time.Time)) {
						t.Errorf("%s = %v, want %v", ck.what, g, ck.want)
					}
					continue
				}
				if ck.got != ck.want {
					t.Errorf("%s = %v, want %v", ck.what, ck.got, ck.want)
				}
			}
		})
	}
}

// BenchmarkDecodeXML reads the largest history XML fixture (relation_4017808.osm,
// 2,510 versions) and reports decompressed MB/s and objects/s.
func BenchmarkDecodeXML(b *testing.B) {
	path := "../testdata/relation_4017808.osm"
	size := int64(len(readFile(b, path)))
	b.ReportAllocs()
	b.SetBytes(size)
	var objects int
	for b.Loop() {
		r, err := OpenFile(b.Context(), path, ReadOptions{})
		if err != nil {
			b.Fatal(err)
		}
		for r.Scan() {
			if r.Item().Object != nil {
				objects++
			}
		}
		if err := r.Err(); err != nil {
			b.Fatal(err)
		}
		r.Close()
	}
	sec := b.Elapsed().Seconds()
	b.ReportMetric(float64(size)*float64(b.N)/1e6/sec, "MB/s")
	b.ReportMetric(float64(objects)/sec, "objects/s")
}
