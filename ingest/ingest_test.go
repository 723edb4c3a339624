package ingest_test

import (
	"context"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/ingest/ingesttest"
	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// fakeFiles serves ingesttest Readers for files written to a temp dir; the
// file bytes only matter for their SHA-256.
type fakeFiles struct {
	dir    string
	items  map[string][]osmfile.Item
	fail   map[string]error
	opened map[string]int
}

func newFakeFiles(tb testing.TB) *fakeFiles {
	tb.Helper()
	return &fakeFiles{dir: tb.TempDir(), items: map[string][]osmfile.Item{}, fail: map[string]error{}, opened: map[string]int{}}
}

// add writes a file named name with the given content and serves items for it.
func (f *fakeFiles) add(tb testing.TB, name, content string, items ...osmfile.Item) string {
	tb.Helper()
	p := filepath.Join(f.dir, name)
	if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
		tb.Fatal(err)
	}
	f.items[p] = items
	return p
}

func (f *fakeFiles) open(_ context.Context, path string) (osmfile.Reader, error) {
	items, ok := f.items[path]
	if !ok {
		return nil, fmt.Errorf("no fake reader for %s", path)
	}
	f.opened[path]++
	r := ingesttest.New(osmfile.FormatXML, items...)
	r.Fail = f.fail[path]
	r.Size = int64(len(items)) * 100
	return r, nil
}

func (f *fakeFiles) options() ingest.IngestOptions {
	return ingest.IngestOptions{Open: f.open, BatchEntries: 3}
}

var t0 = time.Date(2015, 6, 1, 12, 0, 0, 0, time.UTC)

func node(id int64, v int, at time.Duration, lat, lon float64, tags ...string) osmfile.Item {
	return osmfile.Item{Object: &osm.Node{ID: osm.NodeID(id), Version: v, Visible: true, Timestamp: t0.Add(at),
		ChangesetID: osm.ChangesetID(100 + v), UserID: osm.UserID(id%3 + 1), User: fmt.Sprintf("user%d", id%3+1),
		Lat: lat, Lon: lon, Tags: tagList(tags)}, Pos: osmfile.Position{Element: id}}
}

func deletedNode(id int64, v int, at time.Duration) osmfile.Item {
	return osmfile.Item{Object: &osm.Node{ID: osm.NodeID(id), Version: v, Visible: false, Timestamp: t0.Add(at), UserID: 9, User: "user9"},
		Action: osmfile.ActionDelete}
}

func way(id int64, v int, at time.Duration, visible bool, nodes []int64, tags ...string) osmfile.Item {
	w := &osm.Way{ID: osm.WayID(id), Version: v, Visible: visible, Timestamp: t0.Add(at), UserID: 1, User: "user1", Tags: tagList(tags)}
	for _, n := range nodes {
		w.Nodes = append(w.Nodes, osm.WayNode{ID: osm.NodeID(n)})
	}
	return osmfile.Item{Object: w}
}

func tagList(kv []string) osm.Tags {
	var tags osm.Tags
	for i := 0; i+1 < len(kv); i += 2 {
		tags = append(tags, osm.Tag{Key: kv[i], Value: kv[i+1]})
	}
	return tags
}

func openMem(tb testing.TB) *ingest.Store {
	tb.Helper()
	s, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { s.Close() })
	return s
}

// recount derives the totals from a full scan, to check the kept totals.
func recount(tb testing.TB, s *ingest.Store) ingest.Stats {
	tb.Helper()
	ctx := context.Background()
	var st ingest.Stats
	users := map[osm.UserID]bool{}
	for _, typ := range []osm.Type{osm.TypeNode, osm.TypeWay, osm.TypeRelation} {
		var last int64 = -1 << 63
		err := s.ScanVersions(ctx, typ, func(o osm.Object) error {
			var id int64
			var visible bool
			var ts time.Time
			switch o := o.(type) {
			case *osm.Node:
				id, visible, ts = int64(o.ID), o.Visible, o.Timestamp
				st.NodeVersions++
				users[o.UserID] = true
				if visible {
					p := orb.Point{o.Lon, o.Lat}
					if st.HasBBox {
						st.BBox = st.BBox.Extend(p)
					} else {
						st.BBox, st.HasBBox = orb.Bound{Min: p, Max: p}, true
					}
				}
			case *osm.Way:
				id, visible, ts = int64(o.ID), o.Visible, o.Timestamp
				st.WayVersions++
				users[o.UserID] = true
			case *osm.Relation:
				id, visible, ts = int64(o.ID), o.Visible, o.Timestamp
				st.RelationVersions++
				users[o.UserID] = true
			}
			if id != last {
				switch typ {
				case osm.TypeNode:
					st.Nodes++
				case osm.TypeWay:
					st.Ways++
				default:
					st.Relations++
				}
				last = id
			}
			if !visible {
				st.DeletedVersions++
			}
			if !ts.IsZero() && (st.FirstEdit.IsZero() || ts.Before(st.FirstEdit)) {
				st.FirstEdit = ts
			}
			if ts.After(st.LastEdit) {
				st.LastEdit = ts
			}
			return nil
		})
		if err != nil {
			tb.Fatal(err)
		}
	}
	err := s.ScanChangesets(ctx, func(c *osm.Changeset) error {
		st.Changesets++
		users[c.UserID] = true
		return nil
	})
	if err != nil {
		tb.Fatal(err)
	}
	delete(users, 0)
	st.Users = int64(len(users))
	return st
}

func stats(tb testing.TB, s *ingest.Store) ingest.Stats {
	tb.Helper()
	st, err := s.Stats(context.Background())
	if err != nil {
		tb.Fatal(err)
	}
	return st
}

// checkTotals fails when the kept totals differ from a recount.
func checkTotals(tb testing.TB, s *ingest.Store) ingest.Stats {
	tb.Helper()
	got, want := stats(tb, s), recount(tb, s)
	kept := got
	if !got.FirstEdit.Equal(want.FirstEdit) || !got.LastEdit.Equal(want.LastEdit) {
		tb.Errorf("time range %v..%v, recount %v..%v", got.FirstEdit, got.LastEdit, want.FirstEdit, want.LastEdit)
	}
	got.FirstEdit, got.LastEdit, want.FirstEdit, want.LastEdit = time.Time{}, time.Time{}, time.Time{}, time.Time{}
	if got != want {
		tb.Errorf("totals differ from recount:\n kept %+v\nscan %+v", got, want)
	}
	return kept
}

func history() []osmfile.Item {
	return []osmfile.Item{
		node(1, 1, 0, 38.5, -75.5, "amenity", "bench"),
		node(1, 2, time.Hour, 38.6, -75.4, "amenity", "bench"),
		node(2, 1, 0, 38.7, -75.3),
		node(3, 1, 2*time.Hour, 38.8, -75.2),
		deletedNode(3, 2, 3*time.Hour),
		way(10, 1, 0, true, []int64{1, 2, 3}, "highway", "service"),
		way(10, 2, 4*time.Hour, true, []int64{1, 2}, "highway", "service"),
	}
}

func TestIngestIdempotent(t *testing.T) {
	ctx := context.Background()
	ff := newFakeFiles(t)
	a := ff.add(t, "a.osh", "history a", history()...)
	again := ff.add(t, "a-copy.osh", "same history, other bytes", history()...)
	s := openMem(t)

	rep, err := ingest.Ingest(ctx, s, []string{a}, ff.options())
	if err != nil {
		t.Fatal(err)
	}
	first := checkTotals(t, s)
	if sum := rep.Sum(); sum.Versions != 7 || sum.Duplicates != 0 || sum.Conflicts != 0 {
		t.Errorf("first ingest: %+v", sum)
	}
	// counted by hand from history()
	want := ingest.Stats{Nodes: 3, Ways: 1, NodeVersions: 5, WayVersions: 2, DeletedVersions: 1, Users: 4}
	if first.Nodes != want.Nodes || first.Ways != want.Ways || first.NodeVersions != want.NodeVersions ||
		first.WayVersions != want.WayVersions || first.DeletedVersions != want.DeletedVersions || first.Users != want.Users {
		t.Errorf("stats %+v, want %+v", first, want)
	}

	rep, err = ingest.Ingest(ctx, s, []string{a, again}, ff.options())
	if err != nil {
		t.Fatal(err)
	}
	if !rep.Files[0].Skipped || ff.opened[a] != 1 {
		t.Errorf("same file again: skipped=%v, opened %d times", rep.Files[0].Skipped, ff.opened[a])
	}
	if f := rep.Files[1]; f.Skipped || f.Versions != 0 || f.Duplicates != 7 || f.Conflicts != 0 {
		t.Errorf("same content in another file: %+v", f.FileRecord)
	}
	if second := checkTotals(t, s); second != first {
		t.Errorf("stats changed on re-ingest:\n%+v\n%+v", second, first)
	}
	m, err := s.Meta(ctx)
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Files) != 2 || m.Files[0].Path != a || m.Files[1].Path != again || m.Schema != ingest.SchemaVersion {
		t.Errorf("meta: %+v", m)
	}
}

func TestIngestConflict(t *testing.T) {
	ctx := context.Background()
	ff := newFakeFiles(t)
	a := ff.add(t, "a.osm", "a", way(5, 1, 0, true, []int64{1, 2}, "building", "yes"))
	b := ff.add(t, "b.osm", "b", way(5, 1, 0, true, []int64{1, 2}, "building", "house"), way(5, 2, time.Hour, true, []int64{1, 2, 3}))
	s := openMem(t)
	rep, err := ingest.Ingest(ctx, s, []string{a, b}, ff.options())
	if err != nil {
		t.Fatal(err)
	}
	if f := rep.Files[1]; f.Conflicts != 1 || f.Versions != 1 {
		t.Errorf("second file: %+v", f.FileRecord)
	}
	if len(rep.Conflicts) != 1 || rep.Conflicts[0].Object != "way/5 v1" || rep.Conflicts[0].File != b {
		t.Fatalf("conflicts: %+v", rep.Conflicts)
	}
	if msg := rep.Conflicts[0].String(); !strings.Contains(msg, "b.osm") || !strings.Contains(msg, "way/5 v1") {
		t.Errorf("conflict message %q", msg)
	}
	vs, err := s.ObjectVersions(ctx, osm.TypeWay, 5)
	if err != nil {
		t.Fatal(err)
	}
	if len(vs) != 2 || vs[0].(*osm.Way).Tags.Find("building") != "yes" {
		t.Errorf("the first stored version must be kept: %+v", vs)
	}
	checkTotals(t, s)
}

func TestIngestMergesHistoryAndDiff(t *testing.T) {
	ctx := context.Background()
	diff := []osmfile.Item{
		node(1, 3, 5*time.Hour, 38.65, -75.45, "amenity", "bench", "backrest", "yes"),
		node(4, 1, 5*time.Hour, 39.0, -75.0),
		way(10, 3, 6*time.Hour, false, nil),
	}
	for _, order := range []string{"history first", "diff first"} {
		t.Run(order, func(t *testing.T) {
			ff := newFakeFiles(t)
			h := ff.add(t, "h.osh", "history", history()...)
			d := ff.add(t, "d.osc", "diff", diff...)
			paths := []string{h, d}
			if order == "diff first" {
				paths = []string{d, h}
			}
			s := openMem(t)
			if _, err := ingest.Ingest(ctx, s, paths, ff.options()); err != nil {
				t.Fatal(err)
			}
			st := checkTotals(t, s)
			if st.Nodes != 4 || st.NodeVersions != 7 || st.Ways != 1 || st.WayVersions != 3 || st.DeletedVersions != 2 {
				t.Errorf("stats %+v", st)
			}
			vs, err := s.ObjectVersions(ctx, osm.TypeNode, 1)
			if err != nil {
				t.Fatal(err)
			}
			var got []int
			for _, v := range vs {
				got = append(got, v.(*osm.Node).Version)
			}
			if fmt.Sprint(got) != "[1 2 3]" {
				t.Errorf("node/1 versions %v, want [1 2 3]", got)
			}
			if !st.LastEdit.Equal(t0.Add(6 * time.Hour)) {
				t.Errorf("last edit %v", st.LastEdit)
			}
		})
	}
}

func TestObjectVersionsInVersionOrder(t *testing.T) {
	ctx := context.Background()
	ff := newFakeFiles(t)
	// versions arrive out of order and across files; 10 must sort after 2
	a := ff.add(t, "a", "a", node(7, 10, 10*time.Hour, 1, 1), node(7, 2, 2*time.Hour, 1, 2))
	b := ff.add(t, "b", "b", node(7, 1, time.Hour, 1, 3), node(6, 1, 0, 0, 0), node(8, 1, 0, 0, 0))
	s := openMem(t)
	if _, err := ingest.Ingest(ctx, s, []string{a, b}, ff.options()); err != nil {
		t.Fatal(err)
	}
	vs, err := s.ObjectVersions(ctx, osm.TypeNode, 7)
	if err != nil {
		t.Fatal(err)
	}
	var got []int
	for _, v := range vs {
		got = append(got, v.(*osm.Node).Version)
	}
	if fmt.Sprint(got) != "[1 2 10]" {
		t.Errorf("versions %v, want [1 2 10]", got)
	}
	if vs, err := s.ObjectVersions(ctx, osm.TypeWay, 7); err != nil || len(vs) != 0 {
		t.Errorf("way/7: %v, %v", vs, err)
	}
	if st := checkTotals(t, s); st.Nodes != 3 || st.NodeVersions != 5 {
		t.Errorf("stats %+v", st)
	}
}

func TestNodeAt(t *testing.T) {
	ctx := context.Background()
	ff := newFakeFiles(t)
	p := ff.add(t, "n", "n", node(1, 1, 0, 10, 20), node(1, 2, 10*time.Hour, 11, 21), deletedNode(1, 3, 20*time.Hour),
		node(2, 1, time.Hour, 5, 6))
	s := openMem(t)
	if _, err := ingest.Ingest(ctx, s, []string{p}, ff.options()); err != nil {
		t.Fatal(err)
	}
	cases := []struct {
		name string
		id   osm.NodeID
		at   time.Duration
		want orb.Point
		ok   bool
	}{
		{"before the first version", 1, -time.Second, orb.Point{}, false},
		{"at the first version", 1, 0, orb.Point{20, 10}, true},
		{"between versions", 1, 5 * time.Hour, orb.Point{20, 10}, true},
		{"at the second version", 1, 10 * time.Hour, orb.Point{21, 11}, true},
		{"just before deletion", 1, 20*time.Hour - time.Second, orb.Point{21, 11}, true},
		{"after deletion", 1, 25 * time.Hour, orb.Point{}, false},
		{"other node", 2, 2 * time.Hour, orb.Point{6, 5}, true},
		{"unknown node", 3, 2 * time.Hour, orb.Point{}, false},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			got, ok, err := s.NodeAt(ctx, tc.id, t0.Add(tc.at))
			if err != nil {
				t.Fatal(err)
			}
			if ok != tc.ok || got != tc.want {
				t.Errorf("NodeAt = %v, %v; want %v, %v", got, ok, tc.want, tc.ok)
			}
		})
	}
}

// brokenFiles serves a file whose reader fails after the first five items of
// history() at line 41, column 7, and another good file of one node.
func brokenFiles(tb testing.TB) (ff *fakeFiles, items []osmfile.Item, broken, other string) {
	tb.Helper()
	ff = newFakeFiles(tb)
	items = history()
	broken = ff.add(tb, "broken.osh", "broken", items[:5]...)
	ff.fail[broken] = &osmfile.ParseError{File: broken, Pos: osmfile.Position{Line: 41, Column: 7, Element: 6},
		Err: fmt.Errorf("%w: bad lat", osmfile.ErrFormat)}
	other = ff.add(tb, "other.osc", "other", node(50, 1, 0, 1, 1))
	return ff, items, broken, other
}

// checkRecorded fails unless exactly the given files are recorded as completely ingested, in that order.
func checkRecorded(tb testing.TB, s *ingest.Store, paths ...string) {
	tb.Helper()
	m, err := s.Meta(context.Background())
	if err != nil {
		tb.Fatal(err)
	}
	var got []string
	for _, f := range m.Files {
		got = append(got, f.Path)
	}
	if fmt.Sprint(got) != fmt.Sprint(paths) {
		tb.Errorf("files recorded %v, want only the completed %v", got, paths)
	}
}

func TestIngestParseErrorAbortsFile(t *testing.T) {
	ctx := context.Background()
	ff, items, broken, other := brokenFiles(t)
	s := openMem(t)
	rep, err := ingest.Ingest(ctx, s, []string{broken, other}, ff.options())
	var pe *osmfile.ParseError
	if !errors.As(err, &pe) || !errors.Is(err, osmfile.ErrFormat) {
		t.Fatalf("error %v, want an osmfile.ParseError", err)
	}
	if msg := err.Error(); !strings.Contains(msg, "broken.osh") || !strings.Contains(msg, "line 41, column 7") {
		t.Errorf("message %q does not name file and position", msg)
	}
	if rep.Files[0].Err == nil || rep.Files[1].Err != nil || rep.Files[1].Versions != 1 {
		t.Errorf("reports: %+v", rep.Files)
	}
	// BatchEntries 3: the full batches of the broken file are committed, the rest dropped.
	committed := rep.Files[0].Versions
	if st := checkTotals(t, s); committed == 0 || committed >= 5 || st.NodeVersions != committed+1 {
		t.Errorf("broken file: %d versions committed, store has %d node versions", committed, st.NodeVersions)
	}
	checkRecorded(t, s, other)

	fixed := ff.add(t, "fixed.osh", "fixed", items...)
	rep, err = ingest.Ingest(ctx, s, []string{fixed}, ff.options())
	if err != nil {
		t.Fatal(err)
	}
	if f := rep.Files[0]; f.Versions != 7-committed || f.Duplicates != committed {
		t.Errorf("rerun: %+v", f.FileRecord)
	}
	if st := checkTotals(t, s); st.NodeVersions != 6 || st.WayVersions != 2 {
		t.Errorf("stats %+v", st)
	}
}

// cancelAfter cancels a context at the n-th progress update.
type cancelAfter struct {
	ingest.NopProgress
	n      int
	cancel context.CancelFunc
}

func (c *cancelAfter) Update(int64, int64) {
	if c.n--; c.n == 0 {
		c.cancel()
	}
}

func TestIngestCancelLeavesConsistentStore(t *testing.T) {
	ff := newFakeFiles(t)
	var items []osmfile.Item
	for id := int64(1); id <= 200; id++ {
		items = append(items, node(id, 1, time.Duration(id)*time.Minute, float64(id)/10, 1), node(id, 2, time.Duration(id)*time.Hour, 2, float64(id)/10))
	}
	p := ff.add(t, "big.osh", "big", items...)
	s := openMem(t)

	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	opts := ff.options()
	opts.BatchEntries = 50
	opts.Progress = &cancelAfter{n: 2, cancel: cancel}
	_, err := ingest.Ingest(ctx, s, []string{p}, opts)
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("error %v, want context.Canceled", err)
	}
	partial := checkTotals(t, s)
	if partial.NodeVersions == 0 || partial.NodeVersions >= 400 {
		t.Errorf("cancelled ingest stored %d versions; want some but not all", partial.NodeVersions)
	}
	m, err := s.Meta(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	if len(m.Files) != 0 {
		t.Errorf("a cancelled file must not be recorded: %+v", m.Files)
	}

	opts.Progress = nil
	rep, err := ingest.Ingest(context.Background(), s, []string{p}, opts)
	if err != nil {
		t.Fatal(err)
	}
	if f := rep.Files[0]; f.Versions+f.Duplicates != 400 || f.Duplicates != partial.NodeVersions {
		t.Errorf("rerun: %+v after %d stored", f.FileRecord, partial.NodeVersions)
	}
	if st := checkTotals(t, s); st.Nodes != 200 || st.NodeVersions != 400 || st.Users != 3 {
		t.Errorf("stats %+v", st)
	}
}

func TestChangesets(t *testing.T) {
	ctx := context.Background()
	open := &osm.Changeset{ID: 17, UserID: 5, User: "cs-user", CreatedAt: t0, Open: true}
	closed := &osm.Changeset{ID: 17, UserID: 5, User: "cs-user", CreatedAt: t0, ClosedAt: t0.Add(time.Hour), ChangesCount: 3,
		MinLat: 1, MaxLat: 2, MinLon: 3, MaxLon: 4, Tags: osm.Tags{{Key: "comment", Value: "survey"}}}
	other := &osm.Changeset{ID: 17, UserID: 6, User: "someone", CreatedAt: t0, ClosedAt: t0}
	ff := newFakeFiles(t)
	a := ff.add(t, "a", "a", osmfile.Item{Changeset: open}, osmfile.Item{Changeset: &osm.Changeset{ID: 3, CreatedAt: t0, ClosedAt: t0}})
	b := ff.add(t, "b", "b", osmfile.Item{Changeset: closed})
	c := ff.add(t, "c", "c", osmfile.Item{Changeset: other})
	s := openMem(t)
	rep, err := ingest.Ingest(ctx, s, []string{a, b, c}, ff.options())
	if err != nil {
		t.Fatal(err)
	}
	if rep.Files[1].Updated != 1 || rep.Files[2].Conflicts != 1 {
		t.Errorf("open→closed must update, a different closed record conflicts: %+v", rep.Files)
	}
	got, ok, err := s.Changeset(ctx, 17)
	if err != nil || !ok {
		t.Fatal(ok, err)
	}
	if got.Open || got.ChangesCount != 3 || got.Tags.Find("comment") != "survey" || got.MaxLon != 4 {
		t.Errorf("changeset 17 = %+v", got)
	}
	if _, ok, err := s.Changeset(ctx, 99); ok || err != nil {
		t.Errorf("unknown changeset: %v, %v", ok, err)
	}
	var ids []osm.ChangesetID
	if err := s.ScanChangesets(ctx, func(c *osm.Changeset) error { ids = append(ids, c.ID); return nil }); err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(ids) != "[3 17]" {
		t.Errorf("changesets %v", ids)
	}
	if st := checkTotals(t, s); st.Changesets != 2 || st.Users != 1 {
		t.Errorf("stats %+v", st)
	}
}

func TestDerived(t *testing.T) {
	ctx := context.Background()
	s := openMem(t)
	err := s.PutDerived(ctx, func(put func(k, v []byte) error) error {
		for _, kv := range [][2]string{{"ev/2", "b"}, {"ev/1", "a"}, {"ix/1", "x"}} {
			if err := put([]byte(kv[0]), []byte(kv[1])); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	err = s.ScanDerived(ctx, []byte("ev/"), func(k, v []byte) error { got = append(got, string(k)+"="+string(v)); return nil })
	if err != nil {
		t.Fatal(err)
	}
	if fmt.Sprint(got) != "[ev/1=a ev/2=b]" {
		t.Errorf("scan: %v", got)
	}
	if v, ok, err := s.GetDerived(ctx, []byte("ix/1")); err != nil || !ok || string(v) != "x" {
		t.Errorf("get: %q %v %v", v, ok, err)
	}
	if err := s.DropDerived(ctx, []byte("ev/")); err != nil {
		t.Fatal(err)
	}
	if _, ok, _ := s.GetDerived(ctx, []byte("ev/1")); ok {
		t.Error("ev/1 survived DropDerived")
	}
	if _, ok, _ := s.GetDerived(ctx, []byte("ix/1")); !ok {
		t.Error("ix/1 was dropped with ev/")
	}
	stop := errors.New("stop")
	if err := s.PutDerived(ctx, func(func(k, v []byte) error) error { return stop }); !errors.Is(err, stop) {
		t.Errorf("fill error: %v", err)
	}
}

func TestOpenLocked(t *testing.T) {
	dir := t.TempDir()
	s, err := ingest.Open(dir, ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	_, err = ingest.Open(dir, ingest.DefaultOptions())
	if !errors.Is(err, ingest.ErrLocked) {
		t.Fatalf("second open: %v, want ErrLocked", err)
	}
	if !strings.Contains(err.Error(), dir) || strings.Contains(err.Error(), "goroutine") {
		t.Errorf("message %q should name %s plainly", err, dir)
	}
}

func TestReopenKeepsData(t *testing.T) {
	ctx := context.Background()
	dir := t.TempDir()
	ff := newFakeFiles(t)
	p := ff.add(t, "h", "h", history()...)
	s, err := ingest.Open(dir, ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	if _, err := ingest.Ingest(ctx, s, []string{p}, ff.options()); err != nil {
		t.Fatal(err)
	}
	before := checkTotals(t, s)
	if err := s.Close(); err != nil {
		t.Fatal(err)
	}
	s, err = ingest.Open(dir, ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if after := checkTotals(t, s); after != before {
		t.Errorf("after reopen %+v, before %+v", after, before)
	}
}

// TestIngestTxnTooBig lets batches outgrow Badger's transaction limit (8 MiB
// memtables, unbounded batches): set must commit early and the totals must
// match those of an ordinary ingest.
func TestIngestTxnTooBig(t *testing.T) {
	ctx := context.Background()
	var items []osmfile.Item
	for id := int64(1); id <= 40000; id++ {
		items = append(items, node(id, 1, time.Duration(id)*time.Second, float64(id%90), float64(id%180), "k", "v"))
	}
	ff := newFakeFiles(t)
	p := ff.add(t, "many", "many", items...)
	run := func(opts ingest.Options, io ingest.IngestOptions) ingest.Stats {
		s, err := ingest.OpenInMemory(opts)
		if err != nil {
			t.Fatal(err)
		}
		defer s.Close()
		io.Open = ff.open
		if _, err := ingest.Ingest(ctx, s, []string{p}, io); err != nil {
			t.Fatal(err)
		}
		return checkTotals(t, s)
	}
	want := run(ingest.DefaultOptions(), ingest.IngestOptions{})
	got := run(ingest.DefaultOptions().WithMemTableSize(8<<20), ingest.IngestOptions{BatchEntries: 1 << 30, BatchBytes: 1 << 30})
	if got != want || want.NodeVersions != 40000 {
		t.Errorf("with early commits %+v\nordinary %+v", got, want)
	}
}

// TestWritePathsAgree runs the same files through the transactional and the
// bulk path (with a sort buffer so small that every few records spill) and
// expects the same reports, totals and stored versions and changesets:
// conflicts keep the first version read, an open changeset is replaced by a
// closed one, versions arrive out of order and across files.
func TestWritePathsAgree(t *testing.T) {
	open := &osm.Changeset{ID: 17, UserID: 5, User: "cs-user", CreatedAt: t0, Open: true}
	closed := &osm.Changeset{ID: 17, UserID: 5, User: "cs-user", CreatedAt: t0, ClosedAt: t0.Add(time.Hour), ChangesCount: 3}
	other := &osm.Changeset{ID: 17, UserID: 6, User: "someone", CreatedAt: t0, ClosedAt: t0}
	diff := []osmfile.Item{
		node(1, 3, 5*time.Hour, 38.65, -75.45, "amenity", "bench", "backrest", "yes"),
		node(4, 1, 5*time.Hour, 39.0, -75.0),
		way(10, 3, 6*time.Hour, false, nil),
	}
	cases := []struct {
		name  string
		files [][]osmfile.Item
	}{
		{"history then diff", [][]osmfile.Item{history(), diff}},
		{"diff then history", [][]osmfile.Item{diff, history()}},
		{"conflicting way", [][]osmfile.Item{
			{way(5, 1, 0, true, []int64{1, 2}, "building", "yes")},
			{way(5, 1, 0, true, []int64{1, 2}, "building", "house"), way(5, 2, time.Hour, true, []int64{1, 2, 3})},
		}},
		{"versions out of order", [][]osmfile.Item{
			{node(7, 10, 10*time.Hour, 1, 1), node(7, 2, 2*time.Hour, 1, 2)},
			{node(7, 1, time.Hour, 1, 3), node(6, 1, 0, 0, 0), node(8, 1, 0, 0, 0)},
		}},
		{"changesets", [][]osmfile.Item{
			{{Changeset: open}, {Changeset: &osm.Changeset{ID: 3, CreatedAt: t0, ClosedAt: t0}}},
			{{Changeset: closed}},
			{{Changeset: other}, node(9, 1, 0, 1, 1)},
		}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			ff := newFakeFiles(t)
			var paths []string
			for i, items := range tc.files {
				paths = append(paths, ff.add(t, fmt.Sprintf("f%d", i), fmt.Sprintf("content %d", i), items...))
			}
			run := func(path ingest.WritePath) (ingest.Report, string) {
				s := openMem(t)
				opts := ff.options()
				opts.Path, opts.SortBufferBytes = path, 100
				rep, err := ingest.Ingest(context.Background(), s, paths, opts)
				if err != nil {
					t.Fatal(err)
				}
				checkTotals(t, s)
				for i := range rep.Files {
					rep.Files[i].Completed, rep.Files[i].Elapsed = time.Time{}, 0
				}
				return rep, contents(t, s)
			}
			tx, txStored := run(ingest.WriteTransactional)
			bulk, bulkStored := run(ingest.WriteBulk)
			if !bulk.Bulk || tx.Bulk {
				t.Fatalf("paths taken: bulk %v, transactional %v", bulk.Bulk, tx.Bulk)
			}
			if bulkStored != txStored {
				t.Errorf("stored on the bulk path:\n%s\ntransactional:\n%s", bulkStored, txStored)
			}
			if fmt.Sprint(bulk.Files, bulk.Conflicts, bulk.Totals) != fmt.Sprint(tx.Files, tx.Conflicts, tx.Totals) {
				t.Errorf("bulk report %+v\ntransactional %+v", bulk, tx)
			}
		})
	}
}

// contents lists the stored versions, changesets and file records.
func contents(tb testing.TB, s *ingest.Store) string {
	tb.Helper()
	ctx := context.Background()
	var b strings.Builder
	for _, typ := range []osm.Type{osm.TypeNode, osm.TypeWay, osm.TypeRelation} {
		err := s.ScanVersions(ctx, typ, func(o osm.Object) error { fmt.Fprintf(&b, "%+v\n", o); return nil })
		if err != nil {
			tb.Fatal(err)
		}
	}
	if err := s.ScanChangesets(ctx, func(c *osm.Changeset) error { fmt.Fprintf(&b, "%+v\n", c); return nil }); err != nil {
		tb.Fatal(err)
	}
	m, err := s.Meta(ctx)
	if err != nil {
		tb.Fatal(err)
	}
	for _, f := range m.Files {
		f.Completed = time.Time{}
		fmt.Fprintf(&b, "%+v\n", f)
	}
	return b.String()
}

// TestBulkParseErrorKeepsItemsRead: on the bulk path a file abandoned at a
// parse error keeps what was read before the error, gets no file record, and
// the rerun of the fixed file (now on the transactional path) completes it.
func TestBulkParseErrorKeepsItemsRead(t *testing.T) {
	ctx := context.Background()
	ff, items, broken, other := brokenFiles(t)
	s := openMem(t)
	opts := ff.options()
	opts.Path = ingest.WriteBulk
	rep, err := ingest.Ingest(ctx, s, []string{broken, other}, opts)
	var pe *osmfile.ParseError
	if !errors.As(err, &pe) || !strings.Contains(err.Error(), "line 41, column 7") {
		t.Fatalf("error %v, want the osmfile.ParseError", err)
	}
	if !rep.Bulk || rep.Files[0].Err == nil || rep.Files[0].Versions != 5 || rep.Files[1].Err != nil || rep.Files[1].Versions != 1 {
		t.Errorf("reports: %+v", rep.Files)
	}
	checkRecorded(t, s, other)
	fixed := ff.add(t, "fixed.osh", "fixed", items...)
	opts.Path = ingest.WriteAuto
	rep, err = ingest.Ingest(ctx, s, []string{fixed}, opts)
	if err != nil {
		t.Fatal(err)
	}
	if f := rep.Files[0]; rep.Bulk || f.Versions != 2 || f.Duplicates != 5 {
		t.Errorf("rerun: bulk %v, %+v", rep.Bulk, f.FileRecord)
	}
	if st := checkTotals(t, s); st.NodeVersions != 6 || st.WayVersions != 2 {
		t.Errorf("stats %+v", st)
	}
}

// TestBulkCancelStoresNothing: a bulk ingest cancelled while it reads leaves
// the store empty, and the rerun takes the bulk path again.
func TestBulkCancelStoresNothing(t *testing.T) {
	ff := newFakeFiles(t)
	var items []osmfile.Item
	for id := int64(1); id <= 200; id++ {
		items = append(items, node(id, 1, time.Duration(id)*time.Minute, float64(id)/10, 1))
	}
	p := ff.add(t, "big.osh", "big", items...)
	s := openMem(t)
	ctx, cancel := context.WithCancel(context.Background())
	defer cancel()
	opts := ff.options()
	opts.Path, opts.BatchEntries = ingest.WriteBulk, 50
	opts.Progress = &cancelAfter{n: 2, cancel: cancel}
	if _, err := ingest.Ingest(ctx, s, []string{p}, opts); !errors.Is(err, context.Canceled) {
		t.Fatalf("error %v, want context.Canceled", err)
	}
	if st := checkTotals(t, s); st.Versions() != 0 {
		t.Errorf("a cancelled bulk ingest stored %+v", st)
	}
	opts.Progress = nil
	rep, err := ingest.Ingest(context.Background(), s, []string{p}, opts)
	if err != nil {
		t.Fatal(err)
	}
	if f := rep.Files[0]; !rep.Bulk || f.Versions != 200 {
		t.Errorf("rerun: bulk %v, %+v", rep.Bulk, f.FileRecord)
	}
}
