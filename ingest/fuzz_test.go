package ingest

import (
	"bytes"
	"context"
	"errors"
	"testing"
)

// fuzzRead reads data as a file and checks the reader's promises: no panic,
// errors are *ParseError values naming the file with a sentinel, items hold
// exactly one of Object and Changeset, objects carry a positive version and a
// timestamp, element numbers count up from 1, and OsmChange deletes are not visible.
func fuzzRead(t *testing.T, data []byte) {
	const name = "fuzz-input"
	r, err := OpenReader(context.Background(), name, bytes.NewReader(data), ReadOptions{Procs: 1})
	if err != nil {
		checkFuzzError(t, err)
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
			if it.Changeset.CreatedAt.IsZero() || it.Changeset.ID <= 0 {
				t.Fatalf("changeset %+v passed without id or created_at", it.Changeset)
			}
			continue
		}
		_, _, version, ts := objectKey(it.Object)
		if version <= 0 || ts.IsZero() {
			t.Fatalf("%s passed without version or timestamp", objectLabelOf(it.Object))
		}
		if it.Action == ActionDelete && visibleOf(it.Object) {
			t.Fatalf("deleted %s is visible", objectLabelOf(it.Object))
		}
		if r.Format() == FormatOsmChange && it.Action == ActionNone {
			t.Fatalf("OsmChange %s without action", objectLabelOf(it.Object))
		}
	}
	if err := r.Err(); err != nil {
		checkFuzzError(t, err)
	}
}

func checkFuzzError(t *testing.T, err error) {
	t.Helper()
	var pe *ParseError
	if !errors.As(err, &pe) || pe.File != "fuzz-input" {
		t.Fatalf("error %q (%T) is no *ParseError on the input", err, err)
	}
	if !errors.Is(err, ErrFormat) && !errors.Is(err, ErrUnknown) && !errors.Is(err, ErrOrder) {
		t.Fatalf("error %q wraps no sentinel", err)
	}
	if pe.Pos.Offset < 0 || pe.Pos.Line < 0 || pe.Pos.Element < 0 {
		t.Fatalf("error %q has a negative position", err)
	}
}

// Seeds are kept to a few kilobytes: the fuzzer minimizes every new
// interesting input, which takes minutes on a 60 kB one.

// FuzzXMLReader feeds OSM XML history and changeset metadata, seeded with
// small fixtures and prefixes of a larger one (real OSM data, see
// testdata/README.md).
func FuzzXMLReader(f *testing.F) {
	f.Add(readFile(f, "testdata/way_230391153.osm"))
	f.Add(readFile(f, "testdata/changesets_36947117.osm"))
	f.Add(readFile(f, "testdata/way_6394949.osm.gz"))
	f.Add(readFile(f, "testdata/way_6394949.osm")[:1500])
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, data)
	})
}

// FuzzOsmChangeReader feeds OsmChange, seeded with the first modify and
// delete blocks of minute_871.osc (its lines 1-11 and the closing tag) and
// prefixes of the fixtures.
func FuzzOsmChangeReader(f *testing.F) {
	osc := readFile(f, "testdata/minute_871.osc")
	lines := bytes.SplitAfter(osc, []byte("\n"))
	f.Add(append(bytes.Join(lines[:11], nil), "</osmChange>\n"...))
	f.Add(osc[:2000])
	f.Add(readFile(f, "testdata/changeset_38162206.osc")[:2000])
	f.Fuzz(func(t *testing.T, data []byte) {
		fuzzRead(t, data)
	})
}
