package ingest

import (
	"bytes"
	"context"
	"encoding/xml"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/dgraph-io/badger/v4"
	"github.com/loadwake/loadwake/ingest/internal/codec"
	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmpbf"
	"github.com/paulmach/osm/osmxml"
)

func TestOpenRefusesNewerSchema(t *testing.T) {
	dir := t.TempDir()
	s, err := Open(dir, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	err = s.db.Update(func(txn *badger.Txn) error { return txn.Set(codec.MetaKey(metaSchema), []byte("99")) })
	if err != nil {
		t.Fatal(err)
	}
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	_, err = Open(dir, DefaultOptions())
	if !errors.Is(err, ErrSchemaNewer) {
		t.Fatalf("open: %v, want ErrSchemaNewer", err)
	}
	if msg := err.Error(); !strings.Contains(msg, "schema 99") || !strings.Contains(msg, dir) {
		t.Errorf("message %q", msg)
	}
	// the refused store was closed again: a new open meets no lock
	if _, err := Open(dir, DefaultOptions()); errors.Is(err, ErrLocked) {
		t.Error("refused store left locked")
	}
}

func TestOpenRefusesForeignDatabase(t *testing.T) {
	dir := t.TempDir()
	db, err := badger.Open(DefaultOptions().badger(dir))
	if err != nil {
		t.Fatal(err)
	}
	if err := db.Update(func(txn *badger.Txn) error { return txn.Set([]byte("x"), []byte("y")) }); err != nil {
		t.Fatal(err)
	}
	db.Close()
	if _, err := Open(dir, DefaultOptions()); !errors.Is(err, osmfile.ErrFormat) || !errors.Is(err, ErrNotStore) || !strings.Contains(err.Error(), "not a loadwake store") {
		t.Errorf("open: %v", err)
	}
}

// refVersions reads an OSM XML history file with the reference decoder
// github.com/paulmach/osm/osmxml v0.8.0 (or, for OsmChange, encoding/xml into
// osm.Change, marking deletions not visible as the OsmChange format means).
func refVersions(tb testing.TB, path string) []osm.Object {
	tb.Helper()
	data, err := os.ReadFile(path)
	if err != nil {
		tb.Fatal(err)
	}
	var out []osm.Object
	if strings.HasSuffix(path, ".osc") {
		var c osm.Change
		if err := xml.Unmarshal(data, &c); err != nil {
			tb.Fatal(err)
		}
		for _, block := range []*osm.OSM{c.Create, c.Modify, c.Delete} {
			if block == nil {
				continue
			}
			for _, o := range block.Objects() {
				visible := block != c.Delete
				switch o := o.(type) {
				case *osm.Node:
					o.Visible = visible
				case *osm.Way:
					o.Visible = visible
				case *osm.Relation:
					o.Visible = visible
				}
				out = append(out, o)
			}
		}
		return out
	}
	sc := osmxml.New(context.Background(), bytes.NewReader(data))
	defer sc.Close()
	for sc.Scan() {
		out = append(out, sc.Object())
	}
	if err := sc.Err(); err != nil {
		tb.Fatal(err)
	}
	return out
}

// sameVersion compares the fields the store keeps.
func sameVersion(a, b osm.Object) bool {
	const eps = 1e-7 / 2 // half the 7-decimal resolution
	switch a := a.(type) {
	case *osm.Node:
		b, ok := b.(*osm.Node)
		return ok && a.ID == b.ID && a.Version == b.Version && a.Visible == b.Visible && a.Timestamp.Equal(b.Timestamp) &&
			a.ChangesetID == b.ChangesetID && a.UserID == b.UserID && a.User == b.User && sameTags(a.Tags, b.Tags) &&
			(!a.Visible || math.Abs(a.Lat-b.Lat) <= eps && math.Abs(a.Lon-b.Lon) <= eps)
	case *osm.Way:
		b, ok := b.(*osm.Way)
		if !ok || a.ID != b.ID || a.Version != b.Version || a.Visible != b.Visible || !a.Timestamp.Equal(b.Timestamp) ||
			a.ChangesetID != b.ChangesetID || a.UserID != b.UserID || a.User != b.User || !sameTags(a.Tags, b.Tags) ||
			len(a.Nodes) != len(b.Nodes) {
			return false
		}
		for i := range a.Nodes {
			if a.Nodes[i].ID != b.Nodes[i].ID {
				return false
			}
		}
		return true
	case *osm.Relation:
		b, ok := b.(*osm.Relation)
		if !ok || a.ID != b.ID || a.Version != b.Version || a.Visible != b.Visible || !a.Timestamp.Equal(b.Timestamp) ||
			a.ChangesetID != b.ChangesetID || a.UserID != b.UserID || a.User != b.User || !sameTags(a.Tags, b.Tags) ||
			len(a.Members) != len(b.Members) {
			return false
		}
		for i, m := range a.Members {
			n := b.Members[i]
			if m.Type != n.Type || m.Ref != n.Ref || m.Role != n.Role {
				return false
			}
		}
		return true
	}
	return false
}

func sameTags(a, b osm.Tags) bool {
	if len(a) != len(b) {
		return false
	}
	for i := range a {
		if a[i] != b[i] {
			return false
		}
	}
	return true
}

// TestIngestRealFixtures ingests real OSM data and checks every stored
// version against the reference decoder. Sources (see testdata/README):
// the annotate histories way_6394949.osm, way_230391153.osm and
// relation_4017808.osm and the OsmChange minute_871.osc come from
// github.com/paulmach/osm v0.8.0 (annotate/testdata and testdata, ODbL data).
func TestIngestRealFixtures(t *testing.T) {
	ctx := context.Background()
	for _, name := range []string{"way_6394949.osm", "way_230391153.osm", "relation_4017808.osm", "minute_871.osc"} {
		t.Run(name, func(t *testing.T) {
			path := filepath.Join("testdata", name)
			want := refVersions(t, path)
			s, err := OpenInMemory(DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			defer s.Close()
			rep, err := Ingest(ctx, s, []string{path}, IngestOptions{})
			if err != nil {
				t.Fatal(err)
			}
			if got := rep.Files[0].Versions + rep.Files[0].Duplicates; got != int64(len(want)) {
				t.Errorf("stored %d versions, reference decoder reads %d", got, len(want))
			}
			ids := map[osm.Type]map[int64]bool{osm.TypeNode: {}, osm.TypeWay: {}, osm.TypeRelation: {}}
			var deleted int64
			for _, w := range want {
				oid := w.ObjectID()
				ids[oid.Type()][oid.Ref()] = true
				vs, err := s.ObjectVersions(ctx, oid.Type(), oid.Ref())
				if err != nil {
					t.Fatal(err)
				}
				var got osm.Object
				for _, v := range vs {
					if v.ObjectID().Version() == oid.Version() {
						got = v
					}
				}
				if got == nil || !sameVersion(got, w) {
					t.Errorf("%s: stored %+v, reference %+v", oid, got, w)
				}
				if !storeVisible(w) {
					deleted++
				}
			}
			st, err := s.Stats(ctx)
			if err != nil {
				t.Fatal(err)
			}
			if st.Nodes != int64(len(ids[osm.TypeNode])) || st.Ways != int64(len(ids[osm.TypeWay])) ||
				st.Relations != int64(len(ids[osm.TypeRelation])) || st.Versions() != int64(len(want)) ||
				st.DeletedVersions != deleted {
				t.Errorf("stats %+v; reference: %d nodes, %d ways, %d relations, %d versions, %d deleted", st,
					len(ids[osm.TypeNode]), len(ids[osm.TypeWay]), len(ids[osm.TypeRelation]), len(want), deleted)
			}
		})
	}
}

func storeVisible(o osm.Object) bool {
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

// TestIngestSameDataOtherFormats: the gzip and bzip2 copies and the PBF
// history of a fixture carry the same versions, so ingesting them after the
// plain XML stores nothing new and finds no conflict.
func TestIngestSameDataOtherFormats(t *testing.T) {
	ctx := context.Background()
	cases := []struct {
		name  string
		files []string
	}{
		{"compressed copies", []string{"way_6394949.osm", "way_6394949.osm.gz", "way_6394949.osm.bz2"}},
		{"pbf history and xml", []string{"relation_4017808.osh.pbf", "relation_4017808.osm"}},
		{"changesets", []string{"changesets_36947117.osm", "changesets_36947117.osm.gz"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			s, err := OpenInMemory(DefaultOptions())
			if err != nil {
				t.Fatal(err)
			}
			defer s.Close()
			var paths []string
			for _, f := range tc.files {
				paths = append(paths, filepath.Join("testdata", f))
			}
			rep, err := Ingest(ctx, s, paths, IngestOptions{})
			if err != nil {
				t.Fatal(err)
			}
			first := rep.Files[0]
			if first.Versions+first.Changesets == 0 {
				t.Fatalf("%s stored nothing", tc.files[0])
			}
			for _, f := range rep.Files[1:] {
				if f.Versions != 0 || f.Changesets != 0 || f.Conflicts != 0 || f.Duplicates != first.Items {
					t.Errorf("%s: %+v; want %d duplicates and nothing else", f.Path, f.FileRecord, first.Items)
				}
			}
			for _, c := range rep.Conflicts {
				t.Log(c)
			}
		})
	}
}

// TestIngestDelaware ingests the Geofabrik Delaware extract shipped with
// github.com/paulmach/osm v0.8.0 (testdata/delaware-latest.osm.pbf, ODbL)
// into an on-disk store. Counts from Debian osmium-tool, osmium fileinfo -e:
// 723,870 nodes, 73,144 ways, 1,644 relations, no history.
func TestIngestDelaware(t *testing.T) {
	if testing.Short() {
		t.Skip("ingests a 7.8 MB extract")
	}
	ctx := context.Background()
	path := osmModuleTestdata(t, "testdata/delaware-latest.osm.pbf")
	s, err := Open(t.TempDir(), DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if _, err := Ingest(ctx, s, []string{path}, IngestOptions{}); err != nil {
		t.Fatal(err)
	}
	st, err := s.Stats(ctx)
	if err != nil {
		t.Fatal(err)
	}
	const nodes, ways, relations = 723870, 73144, 1644 // osmium fileinfo -e
	if st.Nodes != nodes || st.Ways != ways || st.Relations != relations {
		t.Errorf("stored %d nodes, %d ways, %d relations; osmium counts %d, %d, %d",
			st.Nodes, st.Ways, st.Relations, nodes, ways, relations)
	}
	if st.NodeVersions != nodes || st.WayVersions != ways || st.RelationVersions != relations || st.DeletedVersions != 0 {
		t.Errorf("a snapshot has one visible version per object: %+v", st)
	}
	// The bbox is that of all nodes as the reference decoder
	// github.com/paulmach/osm/osmpbf v0.8.0 reads them (larger than the
	// header bounds: Geofabrik keeps ways that cross the border whole).
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := osmpbf.New(ctx, f, 1)
	defer sc.Close()
	sc.SkipWays, sc.SkipRelations = true, true
	var ref orb.Bound
	first := true
	for sc.Scan() {
		n := sc.Object().(*osm.Node)
		if p := (orb.Point{n.Lon, n.Lat}); first {
			ref, first = orb.Bound{Min: p, Max: p}, false
		} else {
			ref = ref.Extend(p)
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	const eps = 1e-7
	if !st.HasBBox || math.Abs(st.BBox.Min.Lat()-ref.Min.Lat()) > eps || math.Abs(st.BBox.Max.Lat()-ref.Max.Lat()) > eps ||
		math.Abs(st.BBox.Min.Lon()-ref.Min.Lon()) > eps || math.Abs(st.BBox.Max.Lon()-ref.Max.Lon()) > eps {
		t.Errorf("bbox %v, reference decoder %v", st.BBox, ref)
	}
	rep, err := Ingest(ctx, s, []string{path}, IngestOptions{})
	if err != nil || !rep.Files[0].Skipped {
		t.Errorf("second ingest: %+v, %v; want skipped", rep.Files, err)
	}
}
