package osmfile

import (
	"bytes"
	"context"
	"errors"
	"testing"

	"github.com/paulmach/osm"
)

// fuzzRead reads data as a file and checks the reader's promises: no panic,
// errors are *ParseError values naming the file with a sentinel and a
// position inside the input, items hold exactly one of Object and Changeset,
// objects carry a positive version and a timestamp, nodes a location in
// range, element numbers count up from 1, and OsmChange deletes are not visible.
func fuzzRead(t *testing.T, data []byte) {
	const name = "fuzz-input"
	r, err := OpenReader(context.Background(), name, bytes.NewReader(data), ReadOptions{Procs: 1})
	if err != nil {
		checkFuzzError(t, data, FormatUnknown, 0, err)
		return
	}
	defer r.Close()
	var n int64
	for r.Scan() {
		n++
		it := r.Item()
		if (it.Object == nil) == (it.Changeset == nil) {
			t.Fatalf("item %d holds %v and %v", n, it.Object, it.Changeset)
		}
		if it.Pos.Element != n {
			t.Fatalf("item %d has element number %d", n, it.Pos.Element)
		}
		if it.Changeset != nil {
			c := it.Changeset
			if c.CreatedAt.IsZero() || c.ID <= 0 {
				t.Fatalf("changeset %+v passed without id or created_at", c)
			}
			if !inRange(c.MinLat, 90) || !inRange(c.MaxLat, 90) || !inRange(c.MinLon, 180) || !inRange(c.MaxLon, 180) {
				t.Fatalf("changeset %d passed with bounds %v,%v %v,%v", c.ID, c.MinLat, c.MinLon, c.MaxLat, c.MaxLon)
			}
			continue
		}
		_, _, version, ts := objectKey(it.Object)
		if version <= 0 || ts.IsZero() {
			t.Fatalf("%s passed without version or timestamp", objectLabelOf(it.Object))
		}
		if nd, ok := it.Object.(*osm.Node); ok && (!inRange(nd.Lat, 90) || !inRange(nd.Lon, 180)) {
			t.Fatalf("%s passed at %v,%v", objectLabelOf(nd), nd.Lat, nd.Lon)
		}
		if it.Action == ActionDelete && visibleOf(it.Object) {
			t.Fatalf("deleted %s is visible", objectLabelOf(it.Object))
		}
		if r.Format() == FormatOsmChange && it.Action == ActionNone {
			t.Fatalf("OsmChange %s without action", objectLabelOf(it.Object))
		}
	}
	if err := r.Err(); err != nil {
		checkFuzzError(t, data, r.Format(), n, err)
	}
}

// checkFuzzError checks that err is a *ParseError on the fuzz input with a
// sentinel and a position: inside the input, with a line and column in XML,
// and an element number at most one past the items read.
func checkFuzzError(t *testing.T, data []byte, format Format, items int64, err error) {
	t.Helper()
	var pe *ParseError
	if !errors.As(err, &pe) || pe.File != "fuzz-input" {
		t.Fatalf("error %q (%T) is no *ParseError on the input", err, err)
	}
	if !errors.Is(err, ErrFormat) && !errors.Is(err, ErrUnknown) && !errors.Is(err, ErrOrder) {
		t.Fatalf("error %q wraps no sentinel", err)
	}
	p := pe.Pos
	if p.Offset < 0 || p.Line < 0 || p.Column < 0 || p.Element < 0 || p.Element > items+1 {
		t.Fatalf("error %q has a position outside the input (%d items read)", err, items)
	}
	switch format {
	case FormatXML, FormatOsmChange, FormatChangesets:
		if p.Line < 1 || p.Column < 1 {
			t.Fatalf("error %q in XML has no line and column", err)
		}
	}
	compressed := bytes.HasPrefix(data, []byte{0x1f, 0x8b}) || bytes.HasPrefix(data, []byte("BZh"))
	if !compressed && (p.Offset > int64(len(data)) || p.Line > bytes.Count(data, []byte("\n"))+1) {
		t.Fatalf("error %q lies past the end of the %d-byte input", err, len(data))
	}
}

// Seeds are kept to a few kilobytes: the fuzzer minimizes every new
// interesting input, which takes minutes on a 60 kB one.

// FuzzXMLReader feeds OSM XML history, seeded with small fixtures, prefixes
// of a larger one (real OSM data, see testdata/README.md) and hand-made files
// with an element left open or a node out of range.
func FuzzXMLReader(f *testing.F) {
	f.Add(readFile(f, "../testdata/way_230391153.osm"))
	f.Add(readFile(f, "../testdata/way_6394949.osm.gz"))
	f.Add(readFile(f, "../testdata/way_6394949.osm")[:1500])
	f.Add(xmlLines(osmLines()...))
	f.Add(xmlLines(without(osmLines(), 9)...))
	f.Add(xmlLines(replaced(osmLines(), 13, ` <node id="2" `+xmlMeta+` lat="95" lon="2.6"/>`)...))
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, data)
	})
}

// FuzzOsmChangeReader feeds OsmChange, seeded with the first modify and
// delete blocks of minute_871.osc (its lines 1-11 and the closing tag),
// prefixes of the fixtures and a hand-made file.
func FuzzOsmChangeReader(f *testing.F) {
	osc := readFile(f, "../testdata/minute_871.osc")
	lines := bytes.SplitAfter(osc, []byte("\n"))
	f.Add(append(bytes.Join(lines[:11], nil), "</osmChange>\n"...))
	f.Add(osc[:2000])
	f.Add(readFile(f, "../testdata/changeset_38162206.osc")[:2000])
	f.Add(xmlLines(oscLines()...))
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, data)
	})
}

// FuzzChangesetReader feeds changeset metadata, seeded with the fixture
// (plain and bzip2) and a hand-made file.
func FuzzChangesetReader(f *testing.F) {
	f.Add(readFile(f, "../testdata/changesets_36947117.osm"))
	f.Add(readFile(f, "../testdata/changesets_36947117.osm.bz2"))
	f.Add(xmlLines(changesetLines()...))
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, data)
	})
}

// FuzzPBFReader feeds OSM PBF, seeded with hand-made files (the real
// fixtures are 34 kB and more, too large to mutate quickly): dense and plain
// nodes, a deleted node, a way and a relation, with raw and zlib blobs, and a
// file cut inside its data block.
func FuzzPBFReader(f *testing.F) {
	block := pbfSample(true)
	raw, _ := pbfFile(f, false, block)
	zipped, _ := pbfFile(f, true, block)
	f.Add(raw)
	f.Add(zipped)
	f.Add(raw[:len(raw)-10])
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, data)
	})
}
