package osmfile

import (
	"bytes"
	"context"
	"errors"
	"strings"
	"testing"
)

// Small hand-made XML files for the position tests. Each is a list of lines;
// a test states the line of the start tag it expects an error at, and the
// column is one more than that line's leading spaces, both counted from the
// list (the files are built here, so the positions are known by construction).

const (
	xmlHead = `<?xml version="1.0" encoding="UTF-8"?>`
	xmlMeta = `version="1" timestamp="2020-01-01T00:00:00Z" changeset="7" uid="3" user="a"`
)

func xmlLines(lines ...string) []byte {
	return []byte(strings.Join(lines, "\n") + "\n")
}

// osmLines is an OSM XML history with a node, a way and a relation, each with
// children: lines 3-5 node 1, 6-9 way 5, 10-12 relation 9.
func osmLines() []string {
	return []string{
		xmlHead,
		`<osm version="0.6" generator="test">`,
		` <node id="1" ` + xmlMeta + ` lat="1.5" lon="2.5">`,
		`  <tag k="a" v="b"/>`,
		` </node>`,
		` <way id="5" ` + xmlMeta + `>`,
		`  <nd ref="1"/>`,
		`  <tag k="highway" v="track"/>`,
		` </way>`,
		` <relation id="9" ` + xmlMeta + `>`,
		`  <member type="way" ref="5" role=""/>`,
		` </relation>`,
		` <node id="2" ` + xmlMeta + ` lat="1.6" lon="2.6"/>`,
		`</osm>`,
	}
}

// oscLines is an OsmChange with create (lines 3-7), modify (8-12) and delete
// (13-15) blocks.
func oscLines() []string {
	return []string{
		xmlHead,
		`<osmChange version="0.6" generator="test">`,
		` <create>`,
		`  <node id="1" ` + xmlMeta + ` lat="1.5" lon="2.5">`,
		`   <tag k="a" v="b"/>`,
		`  </node>`,
		` </create>`,
		` <modify>`,
		`  <way id="5" ` + xmlMeta + `>`,
		`   <nd ref="1"/>`,
		`  </way>`,
		` </modify>`,
		` <delete>`,
		`  <relation id="9" ` + xmlMeta + ` visible="false"/>`,
		` </delete>`,
		`</osmChange>`,
	}
}

// changesetLines is changeset metadata: changeset 11 on lines 3-5, 12 on 6.
func changesetLines() []string {
	return []string{
		xmlHead,
		`<osm version="0.6" generator="test">`,
		` <changeset id="11" created_at="2020-01-01T00:00:00Z" closed_at="2020-01-01T01:00:00Z" open="false" uid="3" user="a" num_changes="2">`,
		`  <tag k="comment" v="x"/>`,
		` </changeset>`,
		` <changeset id="12" created_at="2020-01-02T00:00:00Z" open="true" uid="3" user="a" num_changes="0"/>`,
		`</osm>`,
	}
}

// without returns lines with line n (1-based) left out.
func without(lines []string, n int) []string {
	out := append([]string(nil), lines[:n-1]...)
	return append(out, lines[n:]...)
}

// replaced returns lines with line n (1-based) replaced by s.
func replaced(lines []string, n int, s string) []string {
	out := append([]string(nil), lines...)
	out[n-1] = s
	return out
}

// TestXMLErrorAtOpenElement checks that an element left open is reported at
// its start tag, whatever follows it, in OSM XML, OsmChange and changeset
// metadata.
func TestXMLErrorAtOpenElement(t *testing.T) {
	osmL, oscL, csL := osmLines(), oscLines(), changesetLines()
	tests := []struct {
		name      string
		data      []byte
		line, col int
		element   int64 // element number in the error: the object left open, 0 outside objects
		msg       string
	}{
		{"osm node without end tag", xmlLines(without(osmL, 5)...), 3, 2, 1, "element <node> is not closed: </osm> at line 13, column 1"},
		{"osm way without end tag", xmlLines(without(osmL, 9)...), 6, 2, 2, "element <way> is not closed: </osm> at line 13, column 1"},
		{"osm relation without end tag", xmlLines(without(osmL, 12)...), 10, 2, 3, "element <relation> is not closed"},
		{"osm tag not self-closed", xmlLines(replaced(osmL, 8, `  <tag k="highway" v="track">`)...), 8, 3, 2, "element <tag> is not closed: </way> at line 9, column 2"},
		{"osm truncated after an object", xmlLines(osmL[:9]...), 2, 1, 0, "element <osm> is not closed: the file ends at line 10, column 1"},
		{"osm misspelled end tag", xmlLines(replaced(osmL, 9, ` </wya>`)...), 9, 2, 2, "end tag </wya> does not match <way> opened at line 6, column 2"},
		{"osmChange node without end tag", xmlLines(without(oscL, 6)...), 4, 3, 1, "element <node> is not closed: </create> at line 6, column 2"},
		{"osmChange way without end tag", xmlLines(without(oscL, 11)...), 9, 3, 2, "element <way> is not closed"},
		{"osmChange modify without end tag", xmlLines(without(oscL, 12)...), 8, 2, 0, "element <modify> is not closed: </osmChange> at line 15, column 1"},
		{"osmChange relation not self-closed", xmlLines(replaced(oscL, 14, strings.Replace(oscL[13], "/>", ">", 1))...), 14, 3, 3, "element <relation> is not closed: </delete> at line 15, column 2"},
		{"changeset without end tag", xmlLines(without(csL, 5)...), 3, 2, 1, "element <changeset> is not closed: </osm> at line 6, column 1"},
		{"changeset truncated inside", xmlLines(csL[:4]...), 3, 2, 1, "element <changeset> is not closed: the file ends at line 5, column 1"},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			r, err := OpenReader(context.Background(), "crafted.xml", bytes.NewReader(tt.data), ReadOptions{})
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			for r.Scan() {
			}
			err = r.Err()
			var pe *ParseError
			if !errors.As(err, &pe) || !errors.Is(err, ErrFormat) {
				t.Fatalf("error %v, want a *ParseError wrapping ErrFormat", err)
			}
			if pe.Pos.Line != tt.line || pe.Pos.Column != tt.col || pe.Pos.Element != tt.element || !strings.Contains(err.Error(), tt.msg) {
				t.Errorf("error %q\nwant line %d, column %d, element %d and %q", err, tt.line, tt.col, tt.element, tt.msg)
			}
			if want := tt.data; pe.Pos.Offset < 0 || pe.Pos.Offset >= int64(len(want)) {
				t.Errorf("offset %d outside the %d-byte file", pe.Pos.Offset, len(want))
			}
		})
	}
}

// TestXMLErrorColumnAtLineEnd checks the column of an error found at a
// newline that encoding/xml pushed back (it then reports column 0): a bad
// attribute name ends line 4, so the error is at the newline, one column
// past the line's last character. Found by FuzzOsmChangeReader.
func TestXMLErrorColumnAtLineEnd(t *testing.T) {
	lines := oscLines()
	lines[3] = strings.TrimSuffix(lines[3], ">") + "0"
	_, err := readLocations(t, xmlLines(lines...))
	var pe *ParseError
	if !errors.As(err, &pe) || !errors.Is(err, ErrFormat) {
		t.Fatalf("error %v, want a *ParseError wrapping ErrFormat", err)
	}
	if want := len(lines[3]) + 1; pe.Pos.Line != 4 || pe.Pos.Column != want {
		t.Errorf("error %q, want line 4, column %d", err, want)
	}
}
