package sortrun

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"testing"

	"github.com/loadwake/loadwake/ingest/osmfile"
)

// testRecords returns n records with keys drawn from few values, so that
// equal keys are common, in read order (seq 0, 1, ...).
func testRecords(tb testing.TB, n int, seed uint64) []Record {
	tb.Helper()
	rng := rand.New(rand.NewPCG(seed, 1))
	recs := make([]Record, n)
	for i := range recs {
		recs[i] = Record{
			Key:  []byte(fmt.Sprintf("k%03d", rng.IntN(n/3+1))),
			Val:  bytes.Repeat([]byte{byte(i)}, rng.IntN(40)),
			Seq:  uint64(i),
			File: rng.IntN(3),
			Pos:  osmfile.Position{Offset: int64(i * 7), Line: i + 1, Column: rng.IntN(80) + 1, Element: int64(i)},
		}
	}
	return recs
}

// collect drains m into copies of its records.
func collect(tb testing.TB, m *Merger) []Record {
	tb.Helper()
	var out []Record
	for {
		r, err := m.Next()
		if err != nil {
			tb.Fatal(err)
		}
		if r == nil {
			return out
		}
		c := *r
		c.Key, c.Val = slices.Clone(r.Key), slices.Clone(r.Val)
		out = append(out, c)
	}
}

// TestMergeOrder spills records into several runs and merges them with what
// stays in memory: the result must equal the standard library's stable sort
// by key of the records in read order, every field intact.
func TestMergeOrder(t *testing.T) {
	cases := []struct {
		name   string
		n      int
		budget int // bytes before a spill
		merged bool
	}{
		{"all in memory", 200, 1 << 20, false},
		{"several runs", 500, 2 << 10, false},
		{"runs merged into one file first", 500, 2 << 10, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			dir := t.TempDir()
			recs := testRecords(t, c.n, uint64(c.n+c.budget))
			var b Buffer
			b.Reset()
			var runs []string
			for i := range recs {
				r := &recs[i]
				if b.Size()+len(r.Key)+len(r.Val)+RecordOverhead > c.budget && b.Len() > 0 {
					p, err := b.Spill(dir, len(runs))
					if err != nil {
						t.Fatal(err)
					}
					runs = append(runs, p)
					b.Reset()
				}
				b.Add(r, c.budget)
			}
			if c.budget < 1<<20 && len(runs) < 2 {
				t.Fatalf("%d runs spilled, want several", len(runs))
			}
			if c.merged {
				p, err := MergeFiles(context.Background(), runs, filepath.Join(dir, "merged"))
				if err != nil {
					t.Fatal(err)
				}
				runs = []string{p}
			}
			b.Sort()
			cursors := []Cursor{b.Cursor()}
			for _, p := range runs {
				fc, err := OpenRun(p)
				if err != nil {
					t.Fatal(err)
				}
				defer fc.Close()
				cursors = append(cursors, fc)
			}
			got := collect(t, NewMerger(cursors))
			want := slices.Clone(recs)
			slices.SortStableFunc(want, func(x, y Record) int { return bytes.Compare(x.Key, y.Key) })
			if len(got) != len(want) {
				t.Fatalf("%d records merged, want %d", len(got), len(want))
			}
			for i := range want {
				g, w := got[i], want[i]
				if !bytes.Equal(g.Key, w.Key) || !bytes.Equal(g.Val, w.Val) || g.Seq != w.Seq || g.File != w.File || g.Pos != w.Pos {
					t.Fatalf("record %d: %+v, want %+v", i, g, w)
				}
			}
		})
	}
}

// TestCorruptRun cuts a spilled run short: reading it fails with ErrCorrupt
// and the file's name, never a panic.
func TestCorruptRun(t *testing.T) {
	dir := t.TempDir()
	var b Buffer
	b.Reset()
	for _, r := range testRecords(t, 50, 7) {
		b.Add(&r, 1<<20)
	}
	p, err := b.Spill(dir, 0)
	if err != nil {
		t.Fatal(err)
	}
	data, err := os.ReadFile(p)
	if err != nil {
		t.Fatal(err)
	}
	if err := os.WriteFile(p, data[:len(data)-3], 0o644); err != nil {
		t.Fatal(err)
	}
	fc, err := OpenRun(p)
	if err != nil {
		t.Fatal(err)
	}
	defer fc.Close()
	m := NewMerger([]Cursor{fc})
	for {
		r, err := m.Next()
		if err != nil {
			if !errors.Is(err, ErrCorrupt) || !bytes.Contains([]byte(err.Error()), []byte(p)) {
				t.Errorf("error %v, want ErrCorrupt naming %s", err, p)
			}
			return
		}
		if r == nil {
			t.Fatal("a run cut short was read to its end without an error")
		}
	}
}
