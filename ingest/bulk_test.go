package ingest

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/dgraph-io/badger/v4"
	"github.com/loadwake/loadwake/ingest/internal/codec"
)

// fixturePaths are real OSM files of testdata/ (see its README) in an order
// that is not key order: history, diffs, changesets and the same history
// again in another format, so the bulk path must sort, merge and find
// duplicates.
func fixturePaths() []string {
	var paths []string
	for _, name := range []string{
		"relation_4017808.osh.pbf", "changeset_38162210.osc", "way_6394949.osm", "minute_871.osc",
		"changesets_36947117.osm", "relation_2714790.osh.pbf", "way_230391153.osm", "changeset_38162206.osc",
		"relation_4017808.osm",
	} {
		paths = append(paths, filepath.Join("testdata", name))
	}
	return paths
}

// dumpStore returns every key and value of the store as text, with the file
// records' completion times left out; sumCounts also replaces a file's new
// and duplicate counts by their sum (which a rerun after an interruption
// splits differently).
func dumpStore(tb testing.TB, s *Store, sumCounts bool) string {
	tb.Helper()
	var out strings.Builder
	err := s.db.View(func(txn *badger.Txn) error {
		it := txn.NewIterator(badger.DefaultIteratorOptions)
		defer it.Close()
		for it.Rewind(); it.Valid(); it.Next() {
			k := it.Item().KeyCopy(nil)
			v, err := it.Item().ValueCopy(nil)
			if err != nil {
				return err
			}
			if bytes.HasPrefix(k, codec.MetaKey(metaFilePrefix)) {
				var f FileRecord
				if err := json.Unmarshal(v, &f); err != nil {
					return err
				}
				f.Completed = time.Time{}
				if sumCounts {
					f.Versions, f.Duplicates = f.Versions+f.Duplicates, 0
					f.Changesets, f.Updated = f.Changesets+f.Updated, 0
				}
				if v, err = json.Marshal(f); err != nil {
					return err
				}
			}
			fmt.Fprintf(&out, "%x %x\n", k, v)
		}
		return nil
	})
	if err != nil {
		tb.Fatal(err)
	}
	return out.String()
}

// ingestInto opens (or creates) the store in dir, ingests paths and closes it.
func ingestInto(tb testing.TB, dir string, paths []string, io IngestOptions) Report {
	tb.Helper()
	s, err := Open(dir, DefaultOptions())
	if err != nil {
		tb.Fatal(err)
	}
	rep, err := Ingest(context.Background(), s, paths, io)
	if err != nil {
		s.Close()
		tb.Fatal(err)
	}
	if err := s.Close(); err != nil {
		tb.Fatal(err)
	}
	return rep
}

func dumpDir(tb testing.TB, dir string, sumCounts bool) string {
	tb.Helper()
	s, err := Open(dir, DefaultOptions())
	if err != nil {
		tb.Fatal(err)
	}
	defer s.Close()
	return dumpStore(tb, s, sumCounts)
}

// TestBulkMatchesTransactional: the bulk path stores exactly the keys and
// values the transactional path stores, with the same per-file counts,
// conflicts and totals, whether its input fits one sorted run or spills to
// many.
func TestBulkMatchesTransactional(t *testing.T) {
	paths := fixturePaths()
	txDir := t.TempDir()
	txRep := ingestInto(t, txDir, paths, IngestOptions{Path: WriteTransactional})
	if txRep.Bulk {
		t.Fatal("WriteTransactional took the bulk path")
	}
	want := dumpDir(t, txDir, false)
	cases := []struct {
		name       string
		sortBuffer int
	}{
		{"one run", 0},
		{"spilled runs", 16 << 10},
		{"more runs than one merge reads", 2 << 10},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			dir := t.TempDir()
			rep := ingestInto(t, dir, paths, IngestOptions{SortBufferBytes: tc.sortBuffer})
			if !rep.Bulk {
				t.Fatal("an empty on-disk store did not take the bulk path")
			}
			if got := dumpDir(t, dir, false); got != want {
				t.Errorf("bulk store differs from transactional store:\n%s", firstDiff(got, want))
			}
			if rep.Totals != txRep.Totals {
				t.Errorf("totals %+v\ntransactional %+v", rep.Totals, txRep.Totals)
			}
			for i, f := range rep.Files {
				g, w := f.FileRecord, txRep.Files[i].FileRecord
				g.Completed, w.Completed = time.Time{}, time.Time{}
				if g != w || f.Skipped != txRep.Files[i].Skipped {
					t.Errorf("file %d: %+v\ntransactional %+v", i, f.FileRecord, txRep.Files[i].FileRecord)
				}
			}
			if fmt.Sprint(rep.Conflicts) != fmt.Sprint(txRep.Conflicts) {
				t.Errorf("conflicts %v\ntransactional %v", rep.Conflicts, txRep.Conflicts)
			}
			if entries, _ := filepath.Glob(filepath.Join(dir, runDirPrefix+"*")); len(entries) != 0 {
				t.Errorf("temporary runs left behind: %v", entries)
			}
			if tc.sortBuffer != 0 {
				return
			}
			// a rerun (of files whose records the store has, under other names) adds nothing
			var copies []string
			for _, p := range paths {
				c := filepath.Join(t.TempDir(), filepath.Base(p))
				data := readFile(t, p)
				if !strings.HasSuffix(p, ".pbf") {
					data = append(data, '\n') // another SHA-256, so the file is read again
				}
				if err := os.WriteFile(c, data, 0o644); err != nil {
					t.Fatal(err)
				}
				copies = append(copies, c)
			}
			again := ingestInto(t, dir, copies, IngestOptions{})
			if sum := again.Sum(); again.Bulk || sum.Versions != 0 || sum.Changesets != 0 || sum.Conflicts != txRep.Sum().Conflicts {
				t.Errorf("rerun: bulk %v, %+v", again.Bulk, sum)
			}
		})
	}
}

// firstDiff shows the first differing line of two dumps.
func firstDiff(got, want string) string {
	g, w := strings.Split(got, "\n"), strings.Split(want, "\n")
	for i := range min(len(g), len(w)) {
		if g[i] != w[i] {
			return fmt.Sprintf("line %d:\n got %s\nwant %s", i+1, g[i], w[i])
		}
	}
	return fmt.Sprintf("%d lines, want %d", len(g), len(w))
}

// TestBulkRefusesStoreWithData: WriteBulk needs an empty store.
func TestBulkRefusesStoreWithData(t *testing.T) {
	dir := t.TempDir()
	ingestInto(t, dir, fixturePaths()[:1], IngestOptions{})
	s, err := Open(dir, DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	before := dumpStore(t, s, false)
	_, err = Ingest(context.Background(), s, fixturePaths()[1:2], IngestOptions{Path: WriteBulk})
	if err == nil || !strings.Contains(err.Error(), "empty store") {
		t.Errorf("bulk into a store with data: %v", err)
	}
	if dumpStore(t, s, false) != before {
		t.Error("the refused bulk ingest changed the store")
	}
}

// TestBulkInMemory: WriteBulk works on an in-memory store too.
func TestBulkInMemory(t *testing.T) {
	s, err := OpenInMemory(DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	rep, err := Ingest(context.Background(), s, fixturePaths(), IngestOptions{Path: WriteBulk, SortBufferBytes: 64 << 10})
	if err != nil {
		t.Fatal(err)
	}
	st, err := s.Stats(context.Background())
	if err != nil || !rep.Bulk || st != rep.Totals || st.Versions() == 0 {
		t.Errorf("stats %+v, %v; report %+v", st, err, rep.Totals)
	}
}

// TestOpenRefusesFolderWithOtherFiles: a folder with the user's files is
// not made into a store.
func TestOpenRefusesFolderWithOtherFiles(t *testing.T) {
	dir := t.TempDir()
	for _, name := range []string{"notes.txt", "photo.jpg"} {
		if err := os.WriteFile(filepath.Join(dir, name), []byte("mine"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	_, err := Open(dir, DefaultOptions())
	if !errors.Is(err, ErrNotStore) {
		t.Fatalf("open: %v, want ErrNotStore", err)
	}
	if msg := err.Error(); !strings.Contains(msg, dir) || !strings.Contains(msg, "notes.txt") || !strings.Contains(msg, "new or empty folder") {
		t.Errorf("message %q should name the folder, a file in it and what to do", msg)
	}
	entries, _ := os.ReadDir(dir)
	if len(entries) != 2 {
		t.Errorf("open wrote into the refused folder: %d entries", len(entries))
	}
	// an empty folder and a missing one become stores
	for _, d := range []string{t.TempDir(), filepath.Join(t.TempDir(), "new")} {
		s, err := Open(d, DefaultOptions())
		if err != nil {
			t.Errorf("open %s: %v", d, err)
			continue
		}
		s.Close()
	}
}
