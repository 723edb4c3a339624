package osmfile

import (
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"reflect"
	"runtime"
	"strings"
	"testing"

	"github.com/klauspost/compress/zstd"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmpbf"
	"google.golang.org/protobuf/encoding/protowire"
)

// TestPBFDelaware reads the Geofabrik Delaware extract shipped with
// github.com/paulmach/osm (testdata/delaware-latest.osm.pbf, ODbL) and checks
// the counts against Debian osmium-tool 1.15.0:
//
//	$ osmium fileinfo -e delaware-latest.osm.pbf
//	  With history: no
//	  Number of nodes: 723870
//	  Number of ways: 73144
//	  Number of relations: 1644
//
// Then it compares every object with what the reference decoder,
// github.com/paulmach/osm/osmpbf v0.8.0, reads from the same file.
func TestPBFDelaware(t *testing.T) {
	if testing.Short() {
		t.Skip("reads a 7.8 MB extract twice")
	}
	path := osmModuleTestdata(t, "testdata/delaware-latest.osm.pbf")
	format, items := mustReadAll(t, path)
	if format != FormatPBF {
		t.Errorf("format %v, want pbf", format)
	}
	want := counts{Nodes: 723870, Ways: 73144, Relations: 1644} // osmium fileinfo -e
	if got := countItems(items); got != want {
		t.Errorf("counts\n got %+v\nwant %+v", got, want)
	}

	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	ref := osmpbf.New(context.Background(), f, runtime.GOMAXPROCS(0))
	defer ref.Close()
	i := 0
	for ref.Scan() {
		if i >= len(items) {
			t.Fatalf("osmpbf has more than our %d objects", len(items))
		}
		if err := sameObject(items[i].Object, ref.Object()); err != nil {
			t.Fatalf("object %d: %v", i, err)
		}
		i++
	}
	if err := ref.Err(); err != nil {
		t.Fatal(err)
	}
	if i != len(items) {
		t.Fatalf("osmpbf read %d objects, we read %d", i, len(items))
	}
}

// sameObject compares two decodings of one object version: ids, metadata,
// visible flag, tags, coordinates, node refs and members.
func sameObject(got, want osm.Object) error {
	if got.ObjectID() != want.ObjectID() {
		return fmt.Errorf("got %v, want %v", got.ObjectID(), want.ObjectID())
	}
	label := objectLabelOf(want)
	switch w := want.(type) {
	case *osm.Node:
		g := got.(*osm.Node)
		if g.Lat != w.Lat || g.Lon != w.Lon {
			return fmt.Errorf("%s: at %v,%v, want %v,%v", label, g.Lat, g.Lon, w.Lat, w.Lon)
		}
		return sameMeta(label, g.Version, w.Version, g.Timestamp.Unix(), w.Timestamp.Unix(), g.ChangesetID, w.ChangesetID,
			g.UserID, w.UserID, g.User, w.User, g.Visible, w.Visible, g.Tags, w.Tags)
	case *osm.Way:
		g := got.(*osm.Way)
		if len(g.Nodes) != len(w.Nodes) {
			return fmt.Errorf("%s: %d nodes, want %d", label, len(g.Nodes), len(w.Nodes))
		}
		for i := range g.Nodes {
			if g.Nodes[i].ID != w.Nodes[i].ID {
				return fmt.Errorf("%s: node %d is %d, want %d", label, i, g.Nodes[i].ID, w.Nodes[i].ID)
			}
		}
		return sameMeta(label, g.Version, w.Version, g.Timestamp.Unix(), w.Timestamp.Unix(), g.ChangesetID, w.ChangesetID,
			g.UserID, w.UserID, g.User, w.User, g.Visible, w.Visible, g.Tags, w.Tags)
	case *osm.Relation:
		g := got.(*osm.Relation)
		if len(g.Members) != len(w.Members) {
			return fmt.Errorf("%s: %d members, want %d", label, len(g.Members), len(w.Members))
		}
		for i := range g.Members {
			gm, wm := g.Members[i], w.Members[i]
			if gm.Type != wm.Type || gm.Ref != wm.Ref || gm.Role != wm.Role {
				return fmt.Errorf("%s: member %d is %+v, want %+v", label, i, gm, wm)
			}
		}
		return sameMeta(label, g.Version, w.Version, g.Timestamp.Unix(), w.Timestamp.Unix(), g.ChangesetID, w.ChangesetID,
			g.UserID, w.UserID, g.User, w.User, g.Visible, w.Visible, g.Tags, w.Tags)
	}
	return fmt.Errorf("unexpected %T", want)
}

func sameMeta(label string, gv, wv int, gt, wt int64, gc, wc osm.ChangesetID, gu, wu osm.UserID, gn, wn string,
	gvis, wvis bool, gtags, wtags osm.Tags) error {
	switch {
	case gv != wv:
		return fmt.Errorf("%s: version %d, want %d", label, gv, wv)
	case gt != wt:
		return fmt.Errorf("%s: timestamp %d, want %d", label, gt, wt)
	case gc != wc:
		return fmt.Errorf("%s: changeset %d, want %d", label, gc, wc)
	case gu != wu || gn != wn:
		return fmt.Errorf("%s: user %d %q, want %d %q", label, gu, gn, wu, wn)
	case gvis != wvis:
		return fmt.Errorf("%s: visible %v, want %v", label, gvis, wvis)
	case len(gtags) != len(wtags) || (len(gtags) > 0 && !reflect.DeepEqual(gtags, wtags)):
		return fmt.Errorf("%s: tags %v, want %v", label, gtags, wtags)
	}
	return nil
}

// TestPBFHistoryMatchesXML reads history PBFs written by Debian osmium-tool
// 1.15.0 from history XML (`osmium sort X.osm -o X.osh.pbf`, see
// testdata/README.md) and checks that each yields the same versions, visible
// flags, tags, coordinates, refs and members as its XML source. osmium sorts
// by type, id and version, so versions are matched by key, not by position.
// Expected counts: `osmium fileinfo -e X.osh.pbf` (nodes, ways, relations) and
// `osmium cat X.osh.pbf -f opl | grep -c ' dD'` (deleted versions).
func TestPBFHistoryMatchesXML(t *testing.T) {
	tests := []struct {
		pbf, xml string
		want     counts
	}{
		// osmium: nodes 2063, ways 430, relations 17; dD 64 (all nodes)
		{"relation_4017808.osh.pbf", "../testdata/relation_4017808.osm", counts{Nodes: 2063, Ways: 430, Relations: 17, Invisible: 64}},
		{"relation_4017808.osh.pbf.gz", "../testdata/relation_4017808.osm", counts{Nodes: 2063, Ways: 430, Relations: 17, Invisible: 64}},
		{"relation_4017808.osh.pbf.bz2", "../testdata/relation_4017808.osm", counts{Nodes: 2063, Ways: 430, Relations: 17, Invisible: 64}},
		// uncompressed blobs: `osmium cat relation_4017808.osh.pbf -f osh.pbf,pbf_compression=none`
		{"relation_4017808.raw.osh.pbf", "../testdata/relation_4017808.osm", counts{Nodes: 2063, Ways: 430, Relations: 17, Invisible: 64}},
		// osmium: nodes 2534, ways 370, relations 30; dD 68 (67 nodes, 1 way)
		{"relation_2714790.osh.pbf", "annotate/testdata/relation_2714790.osm", counts{Nodes: 2534, Ways: 370, Relations: 30, Invisible: 68}},
	}
	for _, tt := range tests {
		t.Run(tt.pbf, func(t *testing.T) {
			xmlPath := tt.xml
			if xmlPath[:9] == "annotate/" {
				xmlPath = osmModuleTestdata(t, tt.xml)
			}
			_, fromXML := mustReadAll(t, xmlPath)
			format, fromPBF := mustReadAll(t, "../testdata/"+tt.pbf)
			if format != FormatPBF {
				t.Fatalf("format %v", format)
			}
			if got := countItems(fromPBF); got != tt.want {
				t.Errorf("counts\n got %+v\nwant %+v", got, tt.want)
			}
			if len(fromXML) != len(fromPBF) {
				t.Errorf("%d versions in the XML, %d in the PBF", len(fromXML), len(fromPBF))
			}
			byKey := make(map[string]osm.Object, len(fromPBF))
			for _, it := range fromPBF {
				byKey[objectLabelOf(it.Object)] = it.Object
			}
			if len(byKey) != len(fromPBF) {
				t.Errorf("%d distinct versions among %d objects", len(byKey), len(fromPBF))
			}
			for _, it := range fromXML {
				label := objectLabelOf(it.Object)
				p, ok := byKey[label]
				if !ok {
					t.Fatalf("%s missing from the PBF", label)
				}
				if err := sameObject(p, it.Object); err != nil {
					// PBF stores coordinates in units of granularity (100 nanodegrees):
					// compare nodes again with that tolerance.
					if n, ok := it.Object.(*osm.Node); ok {
						if err := sameNodeApprox(p.(*osm.Node), n); err == nil {
							continue
						}
					}
					t.Fatal(err)
				}
			}
		})
	}
}

// sameNodeApprox compares nodes with coordinates equal to 1e-7 degrees, the
// PBF default granularity of 100 nanodegrees (osmformat.proto).
func sameNodeApprox(g, w *osm.Node) error {
	if math.Abs(g.Lat-w.Lat) > 1e-7 || math.Abs(g.Lon-w.Lon) > 1e-7 {
		return fmt.Errorf("%s: at %v,%v, want %v,%v", objectLabelOf(w), g.Lat, g.Lon, w.Lat, w.Lon)
	}
	gc, wc := *g, *w
	gc.Lat, gc.Lon, wc.Lat, wc.Lon = 0, 0, 0, 0
	return sameObject(&gc, &wc)
}

// TestPBFCorrupt damages the history PBF fixture in many ways, seeded, and
// checks that reading never panics and that every failure is a *ParseError
// naming the file and a byte offset and unwrapping to ErrFormat.
func TestPBFCorrupt(t *testing.T) {
	src := readFile(t, "../testdata/relation_4017808.osh.pbf")
	check := func(t *testing.T, name string, data []byte) (failed bool) {
		t.Helper()
		r, err := OpenReader(context.Background(), name, &sliceReader{b: data}, ReadOptions{Procs: 2})
		if err == nil {
			for r.Scan() {
			}
			err = r.Err()
			r.Close()
		}
		if err == nil {
			return false
		}
		var pe *ParseError
		if !errors.As(err, &pe) || pe.File != name || !(errors.Is(err, ErrFormat) || errors.Is(err, ErrUnknown) || errors.Is(err, ErrOrder)) {
			t.Fatalf("error %v (%T) is no ParseError on %s with a sentinel", err, err, name)
		}
		return true
	}
	t.Run("truncated", func(t *testing.T) {
		for _, n := range []int{20, 100, 1000, len(src) / 2, len(src) - 1} {
			name := fmt.Sprintf("cut%d.osh.pbf", n)
			if !check(t, name, src[:n]) {
				t.Errorf("%s: no error for a PBF cut at byte %d of %d", name, n, len(src))
			}
		}
	})
	t.Run("flipped", func(t *testing.T) {
		rng := rand.New(rand.NewPCG(1, 2))
		for i := range 300 {
			data := append([]byte(nil), src...)
			for range 1 + rng.IntN(4) {
				data[rng.IntN(len(data))] ^= byte(1 + rng.IntN(255))
			}
			check(t, fmt.Sprintf("flip%d.osh.pbf", i), data)
		}
	})
}

// TestPBFErrorOffset cuts the fixture inside its second block and checks
// that the error names the byte offset where that block starts: the first
// block (OSMHeader) is 4 + BlobHeader + Blob bytes long, read from the file.
func TestPBFErrorOffset(t *testing.T) {
	src := readFile(t, "../testdata/relation_4017808.osh.pbf")
	r := &sliceReader{b: src}
	_, _, first, err := readFileBlock(r)
	if err != nil {
		t.Fatal(err)
	}
	_, _, second, err := readFileBlock(r)
	if err != nil {
		t.Fatal(err)
	}
	cut := src[:first+second/2]
	_, _, err = readAll(t, writeTemp(t, "cut.osh.pbf", cut))
	var pe *ParseError
	if !errors.As(err, &pe) || !errors.Is(err, ErrFormat) {
		t.Fatalf("error %v, want a ParseError wrapping ErrFormat", err)
	}
	if pe.Pos.Offset != first {
		t.Errorf("error at byte %d, want %d (start of the second block)", pe.Pos.Offset, first)
	}
}

type sliceReader struct{ b []byte }

func (s *sliceReader) Read(p []byte) (int, error) {
	if len(s.b) == 0 {
		return 0, io.EOF
	}
	n := copy(p, s.b)
	s.b = s.b[n:]
	return n, nil
}

// BenchmarkDecodeDelaware scans the Delaware extract (7.8 MB, 798,658
// objects) with OpenFile, touching every object, and reports objects/s and
// MB/s of file. The store's full-ingest benchmark sits beside it.
func BenchmarkDecodeDelaware(b *testing.B) {
	path := osmModuleTestdata(b, "testdata/delaware-latest.osm.pbf")
	st, err := os.Stat(path)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.SetBytes(st.Size())
	var objects, tags int
	for b.Loop() {
		r, err := OpenFile(b.Context(), path, ReadOptions{})
		if err != nil {
			b.Fatal(err)
		}
		for r.Scan() {
			it := r.Item()
			objects++
			switch o := it.Object.(type) {
			case *osm.Node:
				tags += len(o.Tags)
			case *osm.Way:
				tags += len(o.Tags) + len(o.Nodes)
			case *osm.Relation:
				tags += len(o.Tags) + len(o.Members)
			}
		}
		if err := r.Err(); err != nil {
			b.Fatal(err)
		}
		r.Close()
	}
	if tags == 0 {
		b.Fatal("no tags read")
	}
	b.ReportMetric(float64(objects)/b.Elapsed().Seconds(), "objects/s")
}

// BenchmarkDecodeDelawareOsmpbf scans the same extract with the reference
// decoder, github.com/paulmach/osm/osmpbf v0.8.0, for comparison with
// BenchmarkDecodeDelaware.
func BenchmarkDecodeDelawareOsmpbf(b *testing.B) {
	path := osmModuleTestdata(b, "testdata/delaware-latest.osm.pbf")
	b.ReportAllocs()
	var objects int
	for b.Loop() {
		f, err := os.Open(path)
		if err != nil {
			b.Fatal(err)
		}
		s := osmpbf.New(b.Context(), f, runtime.GOMAXPROCS(0))
		for s.Scan() {
			objects++
		}
		if err := s.Err(); err != nil {
			b.Fatal(err)
		}
		s.Close()
		f.Close()
	}
	b.ReportMetric(float64(objects)/b.Elapsed().Seconds(), "objects/s")
}

// TestPBFBlobCompression covers the blob encodings osmium does not write as
// zlib: zstd blobs (fileformat.proto Blob.zstd_data, field 7), made here by
// recompressing the raw blobs of relation_4017808.raw.osh.pbf with
// klauspost/compress/zstd, must read like the raw file; lz4 blobs (written by
// `osmium cat relation_4017808.osh.pbf -f osh.pbf,pbf_compression=lz4`) are
// refused with ErrFormat naming the block's byte offset.
func TestPBFBlobCompression(t *testing.T) {
	raw := readFile(t, "../testdata/relation_4017808.raw.osh.pbf")
	enc, err := zstd.NewWriter(nil)
	if err != nil {
		t.Fatal(err)
	}
	defer enc.Close()
	var out []byte
	r := &sliceReader{b: raw}
	for {
		typ, blob, _, err := readFileBlock(r)
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		var data []byte
		for len(blob) > 0 {
			var f field
			if f, blob, err = nextField(blob); err != nil {
				t.Fatal(err)
			}
			if f.num == 1 {
				data = f.b
			}
		}
		if data == nil {
			t.Fatal("fixture block is not raw")
		}
		var nb []byte
		nb = protowire.AppendTag(nb, 2, protowire.VarintType)
		nb = protowire.AppendVarint(nb, uint64(len(data)))
		nb = protowire.AppendTag(nb, 7, protowire.BytesType)
		nb = protowire.AppendBytes(nb, enc.EncodeAll(data, nil))
		var hdr []byte
		hdr = protowire.AppendTag(hdr, 1, protowire.BytesType)
		hdr = protowire.AppendString(hdr, typ)
		hdr = protowire.AppendTag(hdr, 3, protowire.VarintType)
		hdr = protowire.AppendVarint(hdr, uint64(len(nb)))
		out = binary.BigEndian.AppendUint32(out, uint32(len(hdr)))
		out = append(append(out, hdr...), nb...)
	}
	_, want := mustReadAll(t, "../testdata/relation_4017808.raw.osh.pbf")
	_, got := mustReadAll(t, writeTemp(t, "zstd.osh.pbf", out))
	if len(got) != len(want) {
		t.Fatalf("zstd: %d objects, raw: %d", len(got), len(want))
	}
	for i := range got {
		if err := sameObject(got[i].Object, want[i].Object); err != nil {
			t.Fatalf("zstd: %v", err)
		}
	}

	_, _, err = readAll(t, "../testdata/relation_4017808.lz4.osh.pbf")
	var pe *ParseError
	// osmium compresses the header block too, so the error is at byte 0.
	if !errors.As(err, &pe) || !errors.Is(err, ErrFormat) || !strings.Contains(err.Error(), "lz4) is not supported") {
		t.Errorf("lz4: error %v, want a ParseError wrapping ErrFormat saying lz4 is not supported", err)
	}
}
