package osmfile

import (
	"bytes"
	"context"
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestDetect copies each fixture, plain, gzip and bzip2 (made with GNU gzip
// -9 -n and bzip2 -9, see testdata/README.md), under misleading names and
// checks that format detection goes by content and that every copy yields
// the items of the plain file.
func TestDetect(t *testing.T) {
	tests := []struct {
		file   string
		format Format
		comp   Compression
	}{
		{"way_6394949.osm", FormatXML, CompressionNone},
		{"way_6394949.osm.gz", FormatXML, CompressionGzip},
		{"way_6394949.osm.bz2", FormatXML, CompressionBzip2},
		{"minute_871.osc", FormatOsmChange, CompressionNone},
		{"minute_871.osc.gz", FormatOsmChange, CompressionGzip},
		{"minute_871.osc.bz2", FormatOsmChange, CompressionBzip2},
		{"changesets_36947117.osm", FormatChangesets, CompressionNone},
		{"changesets_36947117.osm.gz", FormatChangesets, CompressionGzip},
		{"changesets_36947117.osm.bz2", FormatChangesets, CompressionBzip2},
		{"relation_4017808.osh.pbf", FormatPBF, CompressionNone},
		{"relation_4017808.osh.pbf.gz", FormatPBF, CompressionGzip},
		{"relation_4017808.osh.pbf.bz2", FormatPBF, CompressionBzip2},
	}
	// Names that point at another format or compression than the content.
	misleading := []string{"data.osm.pbf", "data.osc.gz", "changesets.osm.bz2", "notes.txt", "noextension"}
	for _, tt := range tests {
		t.Run(tt.file, func(t *testing.T) {
			plain := strings.TrimSuffix(strings.TrimSuffix(tt.file, ".gz"), ".bz2")
			_, want := mustReadAll(t, filepath.Join("..", "testdata", plain))
			data := readFile(t, filepath.Join("..", "testdata", tt.file))
			for _, name := range misleading {
				p := writeTemp(t, name, data)
				comp, format, err := DetectFile(p)
				if err != nil || comp != tt.comp || format != tt.format {
					t.Errorf("%s: DetectFile = %v, %v, %v; want %v, %v", name, comp, format, err, tt.comp, tt.format)
				}
				format, got := mustReadAll(t, p)
				if format != tt.format {
					t.Errorf("%s: format %v, want %v", name, format, tt.format)
				}
				if countItems(got) != countItems(want) {
					t.Errorf("%s: %+v, want %+v", name, countItems(got), countItems(want))
				}
			}
		})
	}
}

// TestDetectBOM checks that a UTF-8 byte order mark before the XML
// content (allowed by XML 1.0, section 4.3.3) does not hide the format.
func TestDetectBOM(t *testing.T) {
	data := append([]byte("\uFEFF"), readFile(t, "../testdata/way_6394949.osm")...)
	format, items := mustReadAll(t, writeTemp(t, "bom.osm", data))
	if format != FormatXML || len(items) != 38 { // osmium fileinfo -e way_6394949.osm: 33 nodes + 5 ways
		t.Errorf("format %v with %d items, want osm-xml with 38", format, len(items))
	}
}

// TestBytesRead checks that BytesRead counts compressed bytes: after a full
// read it equals the file size, which is smaller than the content.
func TestBytesRead(t *testing.T) {
	for _, name := range []string{"way_6394949.osm.gz", "minute_871.osc.bz2", "relation_4017808.osh.pbf"} {
		t.Run(name, func(t *testing.T) {
			p := filepath.Join("..", "testdata", name)
			st, err := os.Stat(p)
			if err != nil {
				t.Fatal(err)
			}
			r, err := OpenFile(context.Background(), p, ReadOptions{})
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			for r.Scan() {
			}
			if err := r.Err(); err != nil {
				t.Fatal(err)
			}
			if got := r.BytesRead(); got != st.Size() {
				t.Errorf("BytesRead %d, want the file size %d", got, st.Size())
			}
		})
	}
}

// TestBadInput damages real fixtures in the ways files break in practice
// and checks the error: its sentinel, and a message naming the file and a
// position.
func TestBadInput(t *testing.T) {
	way := readFile(t, "../testdata/way_6394949.osm")
	wayGz := readFile(t, "../testdata/way_6394949.osm.gz")
	oscBz := readFile(t, "../testdata/minute_871.osc.bz2")
	cs := readFile(t, "../testdata/changesets_36947117.osm")
	lines := bytes.SplitAfter(way, []byte("\n"))

	corruptBz := append([]byte(nil), oscBz...)
	for i := len(corruptBz) / 2; i < len(corruptBz)/2+16; i++ {
		corruptBz[i] ^= 0x5a
	}
	// Lines 2 and 3 of way_6394949.osm are versions 1 and 2 of node 305541874.
	swapped := bytes.Join(append([][]byte{lines[0], lines[2], lines[1]}, lines[3:]...), nil)

	tests := []struct {
		name     string
		data     []byte
		sentinel error
		where    string // part of the position the message must give
		object   string
	}{
		{"truncated.osm.gz", wayGz[:len(wayGz)/2], ErrFormat, "line ", ""},
		{"corrupt.osc.bz2", corruptBz, ErrFormat, "byte ", ""},
		{"bad-xml.osm", bytes.Replace(way, []byte(`<node id="305541875"`), []byte(`<node id="305541875" <`), 1), ErrFormat, "line 5", ""},
		{"unclosed.osm", way[:len(way)/2], ErrFormat, "line ", ""},
		{"bad-number.osm", bytes.Replace(way, []byte(`id="305541875"`), []byte(`id="3055x41875"`), 1), ErrFormat, "line 5, column 2", ""},
		{"unknown.osm", readFile(t, osmModuleTestdata(t, "LICENSE.md")), ErrUnknown, "byte 0", ""},
		{"empty.osm", nil, ErrUnknown, "byte 0", ""},
		{"html.osm", []byte("<html><body>not found</body></html>"), ErrUnknown, "byte 0", ""},
		{"out-of-order.osm", swapped, ErrOrder, "line 3, column 2", "node/305541874 v1"},
		{"no-timestamp.osm", bytes.Replace(way, []byte(` timestamp="2008-10-19T02:20:22Z"`), nil, 1), ErrFormat, "line 3, column 2", "node/305541874 v2"},
		{"no-version.osm", bytes.Replace(way, []byte(` version="1"`), nil, 1), ErrFormat, "line 2, column 2", "node/305541874 v0"},
		{"bad-date.osm", bytes.Replace(cs, []byte(`created_at="2016-02-01T22:00:56Z"`), []byte(`created_at="01/02/2016 22:00"`), 1), ErrFormat, "line 8, column 3", ""},
		{"no-created-at.osm", bytes.Replace(cs, []byte(`created_at="2016-02-01T22:00:56Z"`), nil, 1), ErrFormat, "line 8, column 3", "changeset/36947173"},
		{"bad-visible.osm", bytes.Replace(way, []byte(`visible="true"`), []byte(`visible="maybe"`), 1), ErrFormat, "line 2, column 2", ""},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			p := writeTemp(t, tt.name, tt.data)
			_, _, err := readAll(t, p)
			if err == nil {
				t.Fatal("no error")
			}
			if !errors.Is(err, tt.sentinel) {
				t.Errorf("error %q does not wrap %v", err, tt.sentinel)
			}
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %q (%T) is no *ParseError", err, err)
			}
			msg := err.Error()
			t.Log(msg)
			if !strings.HasPrefix(msg, p+": ") || !strings.Contains(msg, tt.where) {
				t.Errorf("message %q does not start with the file and give %q", msg, tt.where)
			}
			if pe.Object != tt.object {
				t.Errorf("object %q, want %q", pe.Object, tt.object)
			}
		})
	}
}

// TestCancel checks that a cancelled context stops both readers with the
// context's error.
func TestCancel(t *testing.T) {
	for _, name := range []string{"relation_4017808.osm", "relation_4017808.osh.pbf"} {
		t.Run(name, func(t *testing.T) {
			ctx, cancel := context.WithCancel(context.Background())
			defer cancel()
			r, err := OpenFile(ctx, filepath.Join("..", "testdata", name), ReadOptions{})
			if err != nil {
				t.Fatal(err)
			}
			defer r.Close()
			n := 0
			for r.Scan() {
				n++
				if n == 10 {
					cancel()
				}
			}
			if !errors.Is(r.Err(), context.Canceled) {
				t.Errorf("error %v after %d items, want context.Canceled", r.Err(), n)
			}
			if n >= 2510 { // all versions of the file: osmium fileinfo -e, 2063+430+17
				t.Errorf("read all %d items despite the cancel", n)
			}
		})
	}
}

// TestOpenReaderLeavesStreamOpen checks that Close on a Reader from
// OpenReader does not close the caller's stream, and that OpenFile closes its file.
func TestOpenReaderLeavesStreamOpen(t *testing.T) {
	f, err := os.Open("../testdata/minute_871.osc")
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r, err := OpenReader(context.Background(), f.Name(), f, ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	r.Scan()
	if err := r.Close(); err != nil {
		t.Fatal(err)
	}
	if _, err := f.Seek(0, 0); err != nil {
		t.Errorf("stream closed by Close: %v", err)
	}
	if r.Scan() {
		t.Error("Scan true after Close")
	}
}
