package osmfile

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"testing"

	"github.com/paulmach/osm"
)

// Coordinates in the hand-made files: raw PBF values are in units of 100
// nanodegrees (osmformat.proto's default granularity), so 950000000 is 95°.
// The valid range, [-90, 90] × [-180, 180], is WGS 84's as the OSM API
// stores it (common practice). libosmium's undefined location is 2147483647
// units on both axes (osmium/osm/location.hpp, from memory of its source).

// readLocations reads data and returns the nodes or the error.
func readLocations(tb testing.TB, data []byte) ([]*osm.Node, error) {
	tb.Helper()
	r, err := OpenReader(context.Background(), "crafted", bytes.NewReader(data), ReadOptions{Procs: 1})
	if err != nil {
		return nil, err
	}
	defer r.Close()
	var nodes []*osm.Node
	for r.Scan() {
		if n, ok := r.Item().Object.(*osm.Node); ok {
			nodes = append(nodes, n)
		}
	}
	return nodes, r.Err()
}

// TestPBFLocations checks dense and plain PBF nodes: out-of-range and missing
// locations of visible nodes fail at the block's byte offset with the node's
// element number; deleted nodes without a location pass at 0,0.
func TestPBFLocations(t *testing.T) {
	const undef = 2147483647
	ok := func(id, lat, lon int64) pbfNode {
		return pbfNode{id: id, lat: lat, lon: lon, version: 1, ts: 1577836800, user: 1}
	}
	del := func(n pbfNode) pbfNode { n.version, n.deleted = 2, true; return n }
	noLat := func(n pbfNode) pbfNode { n.noLat = true; return n }
	noLon := func(n pbfNode) pbfNode { n.noLon = true; return n }
	way := pbfWay(5, 1, 1577836800, 1, 2)
	tests := []struct {
		name    string
		group   []byte
		element int64  // element of the error, 0 when the file must read
		msg     string // part of the error message
		want    [][2]float64
	}{
		{"dense edges of the range", pbfDenseNodes(ok(1, 900000000, -1800000000), ok(2, -900000000, 1800000000)), 0, "", [][2]float64{{90, -180}, {-90, 180}}},
		{"dense latitude 95", pbfDenseNodes(ok(1, 10, 20), ok(2, 950000000, 20)), 2, "latitude 95 outside [-90, 90]", nil},
		{"dense longitude -180.0000001", pbfDenseNodes(ok(1, 10, -1800000001)), 1, "longitude -180.0000001 outside [-180, 180]", nil},
		{"dense undefined location", pbfDenseNodes(ok(1, 10, 20), ok(2, undef, undef)), 2, "visible node without a location", nil},
		{"dense deleted at undefined location", pbfDenseNodes(ok(1, 10, 20), del(ok(1, undef, undef))), 0, "", [][2]float64{{1e-6, 2e-6}, {0, 0}}},
		{"plain latitude -90.5", pbfPlainNodes(ok(1, -905000000, 0)), 1, "latitude -90.5 outside", nil},
		{"plain without lat", pbfPlainNodes(ok(1, 10, 20), noLat(ok(2, 0, 20))), 2, "visible node without a location", nil},
		{"plain without lon", pbfPlainNodes(noLon(ok(1, 10, 0))), 1, "visible node without a location", nil},
		{"plain deleted without location", pbfPlainNodes(ok(1, 10, 20), noLat(noLon(del(ok(1, 0, 0))))), 0, "", [][2]float64{{1e-6, 2e-6}, {0, 0}}},
		{"plain undefined location", pbfPlainNodes(ok(1, undef, undef)), 1, "visible node without a location", nil},
	}
	for _, tt := range tests {
		for _, zip := range []bool{false, true} {
			name := tt.name
			if zip {
				name += " zlib"
			}
			t.Run(name, func(t *testing.T) {
				data, offset := pbfFile(t, zip, pbfPrimitiveBlock(tt.group, way))
				nodes, err := readLocations(t, data)
				if tt.element == 0 {
					if err != nil {
						t.Fatal(err)
					}
					if len(nodes) != len(tt.want) {
						t.Fatalf("%d nodes, want %d", len(nodes), len(tt.want))
					}
					for i, n := range nodes {
						if d := n.Lat - tt.want[i][0]; d*d > 1e-18 || (n.Lon-tt.want[i][1])*(n.Lon-tt.want[i][1]) > 1e-18 {
							t.Errorf("node %d at %v,%v, want %v", i+1, n.Lat, n.Lon, tt.want[i])
						}
					}
					return
				}
				var pe *ParseError
				if !errors.As(err, &pe) || !errors.Is(err, ErrFormat) {
					t.Fatalf("error %v, want a *ParseError wrapping ErrFormat", err)
				}
				if pe.Pos.Offset != offset || pe.Pos.Element != tt.element || !strings.Contains(err.Error(), tt.msg) {
					t.Errorf("error %q\nwant byte %d, element %d and %q", err, offset, tt.element, tt.msg)
				}
				if !strings.HasPrefix(pe.Object, "node/") {
					t.Errorf("object %q, want the node", pe.Object)
				}
			})
		}
	}
}

// TestXMLLocations checks OSM XML history, OsmChange and changeset metadata:
// out-of-range and missing locations of visible nodes fail at the node's start
// tag; deleted nodes (visible="false" or in a delete block) need none.
func TestXMLLocations(t *testing.T) {
	node := func(attrs string) string { return ` <node id="1" ` + xmlMeta + ` ` + attrs + `/>` }
	osmFile := func(line string) []byte {
		return xmlLines(xmlHead, `<osm version="0.6">`, node(`lat="1" lon="2"`), line, `</osm>`)
	}
	oscFile := func(block, line string) []byte {
		return xmlLines(xmlHead, `<osmChange version="0.6">`, ` <`+block+`>`, line, ` </`+block+`>`, `</osmChange>`)
	}
	csFile := func(attrs string) []byte {
		return xmlLines(xmlHead, `<osm version="0.6">`,
			` <changeset id="11" created_at="2020-01-01T00:00:00Z" open="false" uid="3" user="a" num_changes="2" `+attrs+`/>`, `</osm>`)
	}
	later := strings.Replace(xmlMeta, `version="1"`, `version="2"`, 1)
	tests := []struct {
		name      string
		data      []byte
		line, col int    // of the error, 0 when the file must read
		msg       string // part of the error message
	}{
		{"osm edges of the range", osmFile(` <node id="2" ` + xmlMeta + ` lat="-90" lon="180"/>`), 0, 0, ""},
		{"osm latitude 95", osmFile(` <node id="2" ` + xmlMeta + ` lat="95.0" lon="2"/>`), 4, 2, "latitude 95 outside [-90, 90]"},
		{"osm longitude 180.5", osmFile(` <node id="2" ` + xmlMeta + ` lat="1" lon="180.5"/>`), 4, 2, "longitude 180.5 outside [-180, 180]"},
		{"osm latitude NaN", osmFile(` <node id="2" ` + xmlMeta + ` lat="NaN" lon="2"/>`), 4, 2, "visible node without a location"},
		{"osm without location", osmFile(` <node id="2" ` + xmlMeta + `/>`), 4, 2, "visible node without a location"},
		{"osm without lon, visible given", osmFile(` <node id="2" ` + xmlMeta + ` visible="true" lat="1"/>`), 4, 2, "visible node without a location"},
		{"osm deleted without location", osmFile(` <node id="1" ` + later + ` visible="false"/>`), 0, 0, ""},
		{"osm deleted out of range", osmFile(` <node id="1" ` + later + ` visible="false" lat="99" lon="2"/>`), 0, 0, ""},
		{"osmChange create without location", oscFile("create", `  <node id="1" `+xmlMeta+`/>`), 4, 3, "visible node without a location"},
		{"osmChange modify longitude -200", oscFile("modify", `  <node id="1" `+xmlMeta+` lat="1" lon="-200"/>`), 4, 3, "longitude -200 outside"},
		{"osmChange delete without location", oscFile("delete", `  <node id="1" `+xmlMeta+`/>`), 0, 0, ""},
		{"changeset bounds in range", csFile(`min_lat="-1" min_lon="-2" max_lat="1" max_lon="2"`), 0, 0, ""},
		{"changeset min_lat -91", csFile(`min_lat="-91" min_lon="-2" max_lat="1" max_lon="2"`), 3, 2, "min_lat -91 outside [-90, 90]"},
		{"changeset max_lon 181", csFile(`min_lat="-1" min_lon="-2" max_lat="1" max_lon="181"`), 3, 2, "max_lon 181 outside [-180, 180]"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			nodes, err := readLocations(t, tt.data)
			if tt.line == 0 {
				if err != nil {
					t.Fatal(err)
				}
				for _, n := range nodes {
					if n.Visible && (n.Lat == 0 && n.Lon == 0) || !n.Visible && !(inRange(n.Lat, 90) && inRange(n.Lon, 180)) {
						t.Errorf("node %d v%d at %v,%v (visible %v)", n.ID, n.Version, n.Lat, n.Lon, n.Visible)
					}
				}
				return
			}
			var pe *ParseError
			if !errors.As(err, &pe) || !errors.Is(err, ErrFormat) {
				t.Fatalf("error %v, want a *ParseError wrapping ErrFormat", err)
			}
			if pe.Pos.Line != tt.line || pe.Pos.Column != tt.col || !strings.Contains(err.Error(), tt.msg) {
				t.Errorf("error %q\nwant line %d, column %d and %q", err, tt.line, tt.col, tt.msg)
			}
		})
	}
}
