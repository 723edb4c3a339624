package layers

import (
	"context"
	"errors"
	"fmt"
	"maps"
	"path/filepath"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/osm"
)

// TestNodePositionsMatchStore compares the node position table with the
// source's NodeAt for every node of a real history (osm module testdata
// way_6394949.osm and way_230391153.osm) at every timestamp in the file and a
// second either side, searching from no hint, from the previous answer (ids
// ascending, then descending, so the search gallops both ways) and from a
// hint at either end. The table's file must be gone afterwards.
func TestNodePositionsMatchStore(t *testing.T) {
	for _, file := range []string{"annotate/testdata/way_6394949.osm", "annotate/testdata/way_230391153.osm"} {
		t.Run(filepath.Base(file), func(t *testing.T) {
			objs := readOSMXML(t, osmTestdata(t, file))
			src := newMemSource(t, objs...)
			var times []time.Time
			idSet := map[osm.NodeID]bool{1: true, 1 << 40: true} // absent, below and above every id
			for _, o := range objs {
				if n, ok := o.(*osm.Node); ok {
					times = append(times, n.Timestamp, n.Timestamp.Add(-time.Second), n.Timestamp.Add(time.Second))
					idSet[n.ID] = true
				}
			}
			ids := slices.Sorted(maps.Keys(idSet))
			dir := t.TempDir()
			tab := nodeTableOf(t, src, dir)
			defer tab.close()
			if left, _ := filepath.Glob(filepath.Join(dir, "*")); len(left) != 0 {
				t.Errorf("files left behind: %q", left)
			}
			check := func(order string, ids []osm.NodeID, hint func(prev int) int) {
				t.Helper()
				h := -1
				for _, id := range ids {
					for _, at := range times {
						h = hint(h)
						p, ok := tab.at(id, at, &h)
						wp, wok, _ := src.NodeAt(context.Background(), id, at)
						if ok != wok || p != wp {
							t.Fatalf("%s: node %d at %s: table %v %v, store %v %v", order, id, at, p, ok, wp, wok)
						}
					}
				}
			}
			check("no hint", ids, func(int) int { return -1 })
			check("ascending", ids, func(prev int) int { return prev })
			rev := slices.Clone(ids)
			slices.Reverse(rev)
			check("descending", rev, func(prev int) int { return prev })
			check("hint at the start", ids, func(int) int { return 0 })
			check("hint at the end", ids, func(int) int { return tab.n - 1 })
		})
	}
}

// nodeTableOf writes the node position table of src's nodes in dir.
func nodeTableOf(tb testing.TB, src Source, dir string) *nodePositions {
	tb.Helper()
	w, err := newNodeFileWriter(dir)
	if err != nil {
		tb.Fatal(err)
	}
	err = src.ScanVersions(context.Background(), osm.TypeNode, func(o osm.Object) error { return w.add(o.(*osm.Node)) })
	if err != nil {
		w.abort()
		tb.Fatal(err)
	}
	tab, err := w.finish()
	if err != nil {
		tb.Fatal(err)
	}
	return tab
}

// TestRelationHistories runs the pass over two real relation histories with
// their member ways and nodes (osm module testdata relation_2714790.osm and
// relation_4017808.osm), which include deletions of members. Checks: no error,
// every deletion event comes from a visible=false version whose predecessor
// had a class, and every relation event is placed.
func TestRelationHistories(t *testing.T) {
	for _, file := range []string{"annotate/testdata/relation_2714790.osm", "annotate/testdata/relation_4017808.osm"} {
		t.Run(file, func(t *testing.T) {
			objs := readOSMXML(t, osmTestdata(t, file))
			src := newMemSource(t, objs...)
			sum := runPass(t, src)
			byID := map[osm.ObjectID]osm.Object{}
			for _, o := range objs {
				byID[o.ObjectID()] = o
			}
			var dels, rels int
			for _, e := range eventsOf(t, src, func(*Event) bool { return true }) {
				if e.Layer == Deletion {
					dels++
					o := byID[e.Object]
					if o == nil || visible(o) {
						t.Errorf("deletion event for %s, which is not a deletion in the file", e.Object)
					}
					if e.Class == "" {
						t.Errorf("deletion event for %s without class", e.Object)
					}
				}
				if e.Object.Type() == osm.TypeRelation {
					rels++
					if !e.Located {
						t.Errorf("relation event %s %s not placed", e.Object, e.Layer)
					}
				}
			}
			if rels == 0 {
				t.Error("no relation events")
			}
			if int64(dels) != sum.Events["deletion"] {
				t.Errorf("summary counts %d deletions, store holds %d", sum.Events["deletion"], dels)
			}
			t.Logf("%s: %+v", file, sum)
		})
	}
}

func visible(o osm.Object) bool {
	switch v := o.(type) {
	case *osm.Node:
		return v.Visible
	case *osm.Way:
		return v.Visible
	case *osm.Relation:
		return v.Visible
	}
	return false
}

// TestRunSkipsAndReruns: a second Run with the same rules and data does
// nothing; Force and new rules re-classify to the same keys (idempotent); new
// data changes the fingerprint.
func TestRunSkipsAndReruns(t *testing.T) {
	ctx := context.Background()
	objs := readOSMXML(t, osmTestdata(t, "annotate/testdata/way_6394949.osm"))
	src := newMemSource(t, objs...)
	first := runPass(t, src)
	keys := strings.Join(src.keys([]byte("d|")), "\n")

	again, err := Run(ctx, src, rules.Default(), Options{})
	if err != nil || !again.Skipped {
		t.Fatalf("second Run: skipped %v, err %v; want skipped", again.Skipped, err)
	}
	forced, err := Run(ctx, src, rules.Default(), Options{Force: true})
	if err != nil || forced.Skipped {
		t.Fatalf("forced Run: skipped %v, err %v", forced.Skipped, err)
	}
	if got := strings.Join(src.keys([]byte("d|")), "\n"); got != keys {
		t.Errorf("forced rerun changed the derived keys")
	}
	if forced.Fingerprint != first.Fingerprint || forced.Events["bookkeeping"] != first.Events["bookkeeping"] {
		t.Errorf("forced rerun summary %+v differs from first %+v", forced, first)
	}

	// The defaults with highway collapsed to one class.
	yml := strings.Replace(string(rules.DefaultYAML()), "{key: highway, detail: value}", "{key: highway, detail: key}", 1)
	other, err := rules.Parse("other.yaml", []byte(yml))
	if err != nil {
		t.Fatal(err)
	}
	re, err := Run(ctx, src, other, Options{})
	if err != nil || re.Skipped {
		t.Fatalf("Run with new rules: skipped %v, err %v", re.Skipped, err)
	}
	if re.RulesHash == first.RulesHash {
		t.Error("new rules, same hash")
	}
	for _, e := range eventsOf(t, src, func(e *Event) bool { return e.Object.Type() == osm.TypeWay }) {
		if e.Class != "highway=*" {
			t.Errorf("after re-classifying, %s has class %q, want highway=*", e.Object, e.Class)
		}
	}

	// More data: the fingerprint changes and the pass runs again.
	src.objs[osm.TypeRelation] = append(src.objs[osm.TypeRelation], &osm.Relation{ID: 1, Version: 1, Visible: true, ChangesetID: 99999999})
	re2, err := Run(ctx, src, other, Options{})
	if err != nil || re2.Skipped || re2.Fingerprint == re.Fingerprint {
		t.Fatalf("Run after new data: skipped %v, fingerprint %q (was %q), err %v", re2.Skipped, re2.Fingerprint, re.Fingerprint, err)
	}
}

// TestRunCancel: a cancelled context stops the pass with context.Canceled and
// leaves no summary, so the next Run starts over.
func TestRunCancel(t *testing.T) {
	src := newMemSource(t, readOSMXML(t, osmTestdata(t, "annotate/testdata/relation_2714790.osm"))...)
	ctx, cancel := context.WithCancel(context.Background())
	n := 0
	_, err := Run(ctx, src, rules.Default(), Options{BatchSize: 1, Progress: func(osm.Type, int64) {
		if n++; n == 3 {
			cancel()
		}
	}})
	if !errors.Is(err, context.Canceled) {
		t.Fatalf("Run = %v, want context.Canceled", err)
	}
	if _, err := Summarize(context.Background(), src); !errors.Is(err, ErrNotClassified) {
		t.Errorf("Summarize after cancel = %v, want ErrNotClassified", err)
	}
}

// TestReaders checks the time range, changeset and first-edit readers on the
// way 6394949 history (osm module testdata).
func TestReaders(t *testing.T) {
	ctx := context.Background()
	src := newMemSource(t, readOSMXML(t, osmTestdata(t, "annotate/testdata/way_6394949.osm"))...)
	runPass(t, src)

	all := eventsOf(t, src, func(*Event) bool { return true })
	for i := 1; i < len(all); i++ {
		if all[i].Time.Before(all[i-1].Time) {
			t.Fatalf("events out of time order at %d", i)
		}
	}
	// Changeset 442821 (2008-10-19) made way v3 (geometry, bookkeeping) and
	// moved node 53101285 (v3) and 53142906 (v3), 53142908 (v3) and
	// 305541871 (v2): per the XML of the file.
	var cs []string
	err := ScanChangesetEvents(ctx, src, 442821, func(e *Event) error {
		cs = append(cs, e.Object.String()+" "+e.Layer.String())
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	want := []string{
		"node/53142908:3 geometry", "way/6394949:3 geometry", "way/6394949:3 bookkeeping",
		"node/53101285:3 geometry", "node/305541871:2 geometry", "node/53142906:3 geometry",
	}
	if !sameSet(cs, want) {
		t.Errorf("changeset 442821 events = %q, want %q", cs, want)
	}
	// Time range [2008-10-19T02:20:15Z, 2008-10-19T02:20:22Z): way v3's two
	// events, node 53142906 v3 (02:20:15) and 53101285 v3 (02:20:19).
	var rng []string
	err = ScanEvents(ctx, src, ts("2008-10-19T02:20:15Z"), ts("2008-10-19T02:20:22Z"), func(e *Event) error {
		rng = append(rng, e.Object.String()+" "+e.Layer.String())
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if w := []string{"node/53142906:3 geometry", "way/6394949:3 geometry", "way/6394949:3 bookkeeping", "node/53101285:3 geometry"}; !sameSet(rng, w) {
		t.Errorf("range events = %q, want %q", rng, w)
	}
	// First edits per account, from the XML: uid 7168 2007-09-17T06:27:00Z
	// (node 53101285 v1), 22946 2008-04-08T09:23:47Z, 25981
	// 2008-10-19T02:19:16Z, 147510 2009-09-16T05:43:15Z, 91499
	// 2016-07-25T18:57:02Z.
	fe, err := FirstEdits(ctx, src)
	if err != nil {
		t.Fatal(err)
	}
	wantFE := map[osm.UserID]string{7168: "2007-09-17T06:27:00Z", 22946: "2008-04-08T09:23:47Z",
		25981: "2008-10-19T02:19:16Z", 147510: "2009-09-16T05:43:15Z", 91499: "2016-07-25T18:57:02Z"}
	if len(fe) != len(wantFE) {
		t.Errorf("first edits for %d accounts, want %d", len(fe), len(wantFE))
	}
	for uid, w := range wantFE {
		if !fe[uid].Equal(ts(w)) {
			t.Errorf("first edit of uid %d = %s, want %s", uid, fe[uid], w)
		}
	}
}

func sameSet(a, b []string) bool {
	if len(a) != len(b) {
		return false
	}
	m := map[string]int{}
	for _, s := range a {
		m[s]++
	}
	for _, s := range b {
		if m[s]--; m[s] < 0 {
			return false
		}
	}
	return true
}

// TestNodeWayTable checks the node→way table against the pairs read directly
// from every way version of a real history (osm module testdata
// relation_2714790.osm), sorted in one run and in runs of 7 and 1000 pairs, looked up with and without a running hint. No temporary file may
// be left behind.
func TestNodeWayTable(t *testing.T) {
	ctx := context.Background()
	src := newMemSource(t, readOSMXML(t, osmTestdata(t, "annotate/testdata/relation_2714790.osm"))...)
	want := map[osm.NodeID][]osm.WayID{}
	for _, o := range src.objs[osm.TypeWay] {
		w := o.(*osm.Way)
		for _, wn := range w.Nodes {
			if !slices.Contains(want[wn.ID], w.ID) {
				want[wn.ID] = append(want[wn.ID], w.ID)
			}
		}
	}
	ids := slices.Sorted(maps.Keys(want))
	ids = append([]osm.NodeID{-5, 0}, append(ids, ids[len(ids)-1]+1)...) // absent ids at both ends
	for _, runLen := range []int{7, 1000, 1 << 20} {
		t.Run(fmt.Sprintf("runs of %d", runLen), func(t *testing.T) {
			dir := t.TempDir()
			tab, err := buildNodeWays(ctx, src, dir, runLen)
			if err != nil {
				t.Fatal(err)
			}
			defer tab.close()
			if left, _ := filepath.Glob(filepath.Join(dir, "*")); len(left) != 0 {
				t.Errorf("files left behind: %q", left)
			}
			hint := -1
			for _, id := range ids {
				w := slices.Clone(want[id])
				slices.Sort(w)
				for _, h := range []*int{&hint, new(int)} {
					var got []osm.WayID
					tab.ways(id, h, func(wid osm.WayID) { got = append(got, wid) })
					if !slices.Equal(got, w) {
						t.Fatalf("node %d: ways %v, want %v", id, got, w)
					}
				}
			}
		})
	}
}
