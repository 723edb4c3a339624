package ingest

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"os"

	"github.com/dgraph-io/ristretto/v2/z"
	"github.com/loadwake/loadwake/ingest/internal/codec"
	"github.com/loadwake/loadwake/ingest/internal/sortrun"
)

// derivedSortBytes is the sort buffer of PutDerivedSorted: how many bytes of
// records it holds before it writes a sorted run to a temporary file.
const derivedSortBytes = 32 << 20

// streamDerived is the one stream id of PutDerivedSorted's bulk write.
const streamDerived = 1

// PutDerivedSorted writes derived data that fill produces in any key order,
// many records at a time: the records (keys and values are copied) are
// sorted in runs of derivedSortBytes, spilled to temporary files in tempDir
// ("" means os.TempDir()), merged in key order and written through Badger's
// StreamWriter in incremental mode, which builds tables directly at the
// level above the store's data: no write-ahead log, memtables or
// compactions, and memory bounded by the sort buffer and one table builder
// however many records come. fill must not call the store's other write
// methods: writes are held back until the records are written. A key given
// twice keeps its last value.
//
// The records must not exist in the store (drop their prefix first): a
// stored key would shadow or be shadowed unpredictably. When the store
// cannot take an incremental bulk write (in memory, or the memtable holds
// unflushed writes), the merged records go through write batches instead,
// with the same result. Like PutDerived the write is not atomic as a whole;
// an owner that is interrupted drops its prefix and writes again.
func (s *Store) PutDerivedSorted(ctx context.Context, tempDir string, fill func(put func(key, value []byte) error) error) error {
	_, err := s.putDerivedSorted(ctx, tempDir, derivedSortBytes, fill)
	return err
}

// putDerivedSorted is PutDerivedSorted with a sort buffer of budget bytes;
// streamed reports whether the records went through the StreamWriter.
func (s *Store) putDerivedSorted(ctx context.Context, tempDir string, budget int, fill func(put func(key, value []byte) error) error) (streamed bool, err error) {
	if err := s.usable(); err != nil {
		return false, err
	}
	dir, err := os.MkdirTemp(tempDir, "loadwake-derived-")
	if err != nil {
		return false, fmt.Errorf("%s: folder for sorted derived data: %w", s.name(), err)
	}
	defer os.RemoveAll(dir)
	var (
		buf  sortrun.Buffer
		runs []string
		r    sortrun.Record
		n    uint64
	)
	buf.Reset()
	put := func(key, value []byte) error {
		if len(key) == 0 {
			return errors.New("ingest: empty derived key")
		}
		if len(key) > 254 {
			return fmt.Errorf("ingest: derived key of %d bytes, at most 254", len(key))
		}
		if n++; n%scanBatch == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		r.Key = append(append(r.Key[:0], codec.PrefixDerived), key...)
		r.Val, r.Seq = value, n
		if buf.Size()+len(r.Key)+len(value)+sortrun.RecordOverhead > budget && buf.Len() > 0 {
			path, err := buf.Spill(dir, len(runs))
			if err != nil {
				return fmt.Errorf("%s: %w", s.name(), err)
			}
			runs = append(runs, path)
			buf.Reset()
		}
		buf.Add(&r, budget)
		return nil
	}
	if err := fill(put); err != nil {
		return false, err
	}
	if runs, err = reduceRunFiles(ctx, runs, dir); err != nil {
		return false, fmt.Errorf("%s: %w", s.name(), err)
	}
	buf.Sort()
	cursors := []sortrun.Cursor{buf.Cursor()}
	for _, path := range runs {
		c, err := sortrun.OpenRun(path)
		if err != nil {
			return false, fmt.Errorf("%s: %w", s.name(), err)
		}
		defer c.Close()
		cursors = append(cursors, c)
	}
	m := sortrun.NewMerger(cursors)
	if s.dir == "" {
		return false, s.putMerged(ctx, m)
	}
	sw := s.db.NewStreamWriter()
	if err := sw.PrepareIncremental(); err != nil {
		sw.Cancel()
		return false, s.putMerged(ctx, m)
	}
	defer func() {
		if err != nil {
			sw.Cancel()
		}
	}()
	out := &streamOut{sw: sw, buf: z.NewBuffer(2*bulkFlushBytes, "ingest.derived")}
	defer out.buf.Release()
	err = eachMerged(ctx, m, func(key, val []byte) error { return out.put(streamDerived, key, val) })
	if err != nil {
		return false, err
	}
	out.done()
	if err := out.flush(); err != nil {
		return false, fmt.Errorf("%s: write derived data: %w", s.name(), err)
	}
	if err := sw.Flush(); err != nil {
		return false, fmt.Errorf("%s: write derived data: %w", s.name(), err)
	}
	return true, nil
}

// putMerged writes the merged records through write batches, in key order.
func (s *Store) putMerged(ctx context.Context, m *sortrun.Merger) error {
	wb := s.db.NewWriteBatch()
	err := eachMerged(ctx, m, func(key, val []byte) error {
		return wb.Set(bytes.Clone(key), bytes.Clone(val))
	})
	if err != nil {
		wb.Cancel()
		return err
	}
	if err := wb.Flush(); err != nil {
		return fmt.Errorf("%s: write derived data: %w", s.name(), err)
	}
	return nil
}

// eachMerged calls fn with each distinct key of the merged runs and its last
// value (the record put last), checking ctx every scanBatch records.
func eachMerged(ctx context.Context, m *sortrun.Merger, fn func(key, val []byte) error) error {
	var cur sortrun.Record
	have := false
	for n := 1; ; n++ {
		if n%scanBatch == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		r, err := m.Next()
		if err != nil {
			return err
		}
		if r != nil && have && bytes.Equal(r.Key, cur.Key) {
			cur.Val = append(cur.Val[:0], r.Val...) // a later put of the same key
			continue
		}
		if have {
			if err := fn(cur.Key, cur.Val); err != nil {
				return err
			}
		}
		if r == nil {
			return nil
		}
		cur.Key = append(cur.Key[:0], r.Key...)
		cur.Val = append(cur.Val[:0], r.Val...)
		have = true
	}
}
