package layers

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"os"
	"sort"
)

// A sorted table is a temporary file of fixed-size little-endian records
// sorted by the int64 key in each record's first 8 bytes. The pass writes its
// node position and node→way tables this way and reads them through a
// read-only memory mapping, so that a lookup is a binary search and the
// process holds no per-record memory.

// tableWriter writes the records of a sorted table in key order.
type tableWriter struct {
	f      *os.File
	w      *bufio.Writer
	recLen int
	n      int
	what   string // for errors
}

// newTableWriter creates the table's file in dir ("" means os.TempDir()).
func newTableWriter(dir, pattern, what string, recLen int) (*tableWriter, error) {
	f, err := os.CreateTemp(dir, pattern)
	if err != nil {
		return nil, fmt.Errorf("%s: %w", what, err)
	}
	return &tableWriter{f: f, w: bufio.NewWriterSize(f, 1<<20), recLen: recLen, what: what}, nil
}

// write appends one record of recLen bytes.
func (w *tableWriter) write(rec []byte) error {
	if _, err := w.w.Write(rec); err != nil {
		return fmt.Errorf("%s %s: %w", w.what, w.f.Name(), err)
	}
	w.n++
	return nil
}

// finish flushes the file, maps it for reading and removes its name, so that
// nothing is left behind once the table is closed.
func (w *tableWriter) finish() (*sortedTable, error) {
	name := w.f.Name()
	err := w.w.Flush()
	var data []byte
	var unmap func() error
	if err == nil {
		data, unmap, err = mapFile(w.f, int64(w.n)*int64(w.recLen))
	}
	err = errors.Join(err, w.f.Close(), os.Remove(name))
	if err != nil {
		if unmap != nil {
			err = errors.Join(err, unmap())
		}
		return nil, fmt.Errorf("%s %s: %w", w.what, name, err)
	}
	t := &sortedTable{data: data, n: w.n, recLen: w.recLen, unmap: unmap}
	t.buildFence(fenceEvery)
	return t, nil
}

// fenceEvery is how many records one fence key covers at least, and
// maxFence how many fence keys a table holds at most (8 MiB): a search
// first finds its block among the fence keys in memory, then searches the
// block's records (512 of 24 bytes: 3 pages) in the mapping, instead of
// touching some 23 pages spread over the whole table.
const (
	fenceEvery = 512
	maxFence   = 1 << 20
)

// buildFence keeps the key of every every-th record in memory, every at
// least minEvery and large enough that at most maxFence keys are kept.
func (t *sortedTable) buildFence(minEvery int) {
	t.every = max(minEvery, (t.n+maxFence-1)/maxFence, 1)
	t.fence = make([]int64, 0, (t.n+t.every-1)/t.every)
	for i := 0; i < t.n; i += t.every {
		t.fence = append(t.fence, t.key(i))
	}
}

// block returns the range [lo, hi] of indexes that holds the first record
// with a key not below want, from the fence keys.
func (t *sortedTable) block(want int64) (lo, hi int) {
	k := sort.Search(len(t.fence), func(i int) bool { return t.fence[i] >= want })
	if k > 0 {
		lo = (k-1)*t.every + 1
	}
	hi = t.n
	if k < len(t.fence) {
		hi = k * t.every
	}
	return lo, hi
}

// abort closes and removes the file after a failure.
func (w *tableWriter) abort() {
	w.f.Close()
	os.Remove(w.f.Name())
}

// sortedTable is a finished table, read-only and safe for concurrent use.
type sortedTable struct {
	data   []byte
	n      int
	recLen int
	unmap  func() error
	fence  []int64 // keys of records 0, every, 2*every, ...
	every  int
}

// rec returns record i.
func (t *sortedTable) rec(i int) []byte { return t.data[i*t.recLen : (i+1)*t.recLen] }

// key returns the key of record i.
func (t *sortedTable) key(i int) int64 {
	return int64(binary.LittleEndian.Uint64(t.data[i*t.recLen:]))
}

// search returns the index of the first record with a key not below want. It
// finds the block of records that holds it from the fence keys, then, when
// hint (the index a previous search returned) lies in that block, gallops
// out from it, since successive lookups mostly ask for nearby keys (the
// nodes of one way, the vertices of one area); otherwise it searches the
// block.
func (t *sortedTable) search(want int64, hint int) int {
	lo, hi := t.block(want) // the answer lies in [lo, hi]
	if hint >= lo && hint < hi {
		if t.key(hint) < want {
			lo = hint + 1
			for step := 1; ; step *= 2 {
				j := hint + step
				if j >= hi {
					break
				}
				if t.key(j) >= want {
					hi = j
					break
				}
				lo = j + 1
			}
		} else {
			hi = hint
			for step := 1; ; step *= 2 {
				j := hint - step
				if j < lo {
					break
				}
				if t.key(j) < want {
					lo = j + 1
					break
				}
				hi = j
			}
		}
	}
	return lo + sort.Search(hi-lo, func(i int) bool { return t.key(lo+i) >= want })
}

// release drops the table's pages from the resident set (see releaseMapping),
// so that the process's memory does not grow with the table while the page
// cache keeps what is read often.
func (t *sortedTable) release() {
	if t != nil {
		releaseMapping(t.data)
	}
}

// size is the table's size in bytes; 0 for nil.
func (t *sortedTable) size() int64 {
	if t == nil {
		return 0
	}
	return int64(len(t.data))
}

// close unmaps the table; closing a nil or closed table does nothing.
func (t *sortedTable) close() error {
	if t == nil || t.unmap == nil {
		return nil
	}
	err := t.unmap()
	t.data, t.n, t.unmap, t.fence = nil, 0, nil, nil
	return err
}
