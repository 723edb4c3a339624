package sortrun

import (
	"bufio"
	"bytes"
	"container/heap"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"

	"github.com/loadwake/loadwake/ingest/osmfile"
)

// A Record is one key and value on its way to a bulk write, with where it came
// from: seq is its place in the order Ingest read the items (lower is
// earlier), file the index of its file among Ingest's paths and pos its
// position there, for conflict reports.
//
// Encoded in a run, a record is: key length (1 byte), key, value length
// (uvarint), value, then seq, file, pos.Offset, pos.Line, pos.Column and
// pos.Element as uvarints.
type Record struct {
	Key, Val []byte
	Seq      uint64
	File     int
	Pos      osmfile.Position
}

func appendRecord(dst []byte, r *Record) []byte {
	dst = append(dst, byte(len(r.Key)))
	dst = append(dst, r.Key...)
	dst = binary.AppendUvarint(dst, uint64(len(r.Val)))
	dst = append(dst, r.Val...)
	dst = binary.AppendUvarint(dst, r.Seq)
	dst = binary.AppendUvarint(dst, uint64(r.File))
	dst = binary.AppendUvarint(dst, uint64(r.Pos.Offset))
	dst = binary.AppendUvarint(dst, uint64(r.Pos.Line))
	dst = binary.AppendUvarint(dst, uint64(r.Pos.Column))
	return binary.AppendUvarint(dst, uint64(r.Pos.Element))
}

// ErrCorrupt marks a spilled run that cannot be read back: the temporary file was
// changed or cut short under the ingest.
var ErrCorrupt = errors.New("ingest: corrupt temporary sort run")

// RecordOverhead bounds the bytes a record takes in a run besides its key and
// value.
const RecordOverhead = 1 + 6*binary.MaxVarintLen64 + binary.MaxVarintLen32

// checkEvery is how many records a merge writes between checks of its context.
const checkEvery = 1024

// parseRecord reads the record at the start of b into r, whose slices then
// point into b, and returns its encoded length.
func parseRecord(b []byte, r *Record) (int, error) {
	if len(b) < 1 || len(b) < 1+int(b[0]) {
		return 0, ErrCorrupt
	}
	n := 1 + int(b[0])
	r.Key = b[1:n]
	vl, k := binary.Uvarint(b[n:])
	if k <= 0 || uint64(len(b)-n-k) < vl {
		return 0, ErrCorrupt
	}
	n += k
	r.Val = b[n : n+int(vl)]
	n += int(vl)
	var f [6]uint64
	for i := range f {
		v, k := binary.Uvarint(b[n:])
		if k <= 0 {
			return 0, ErrCorrupt
		}
		f[i], n = v, n+k
	}
	r.Seq, r.File = f[0], int(f[1])
	r.Pos = osmfile.Position{Offset: int64(f[2]), Line: int(f[3]), Column: int(f[4]), Element: int64(f[5])}
	return n, nil
}

// Buffer collects records in memory up to a byte budget. sorted stays
// true while the records arrive in key order, which spares the sort for
// sorted input (a history file is ordered by type, id and version).
type Buffer struct {
	data    []byte
	idx     []uint32 // start offsets in data, in arrival order until sorted
	sorted  bool
	lastKey []byte
	scratch []byte
}

// Reset empties the buffer, keeping its memory.
func (b *Buffer) Reset() {
	b.data, b.idx, b.sorted, b.lastKey = b.data[:0], b.idx[:0], true, nil
}

// Len is the number of records in the buffer.
func (b *Buffer) Len() int { return len(b.idx) }

// Size is the number of bytes the buffer's records take.
func (b *Buffer) Size() int { return len(b.data) }

// Cursor walks the buffer's records; call Sort first.
func (b *Buffer) Cursor() Cursor { return &memCursor{b: b} }

// Add appends r; its bytes are copied. budget is the byte size the buffer
// may grow to: it doubles up to that, so a small input allocates little.
func (b *Buffer) Add(r *Record, budget int) {
	b.scratch = appendRecord(b.scratch[:0], r)
	if need := len(b.data) + len(b.scratch); need > cap(b.data) {
		grown := make([]byte, len(b.data), max(need, min(2*cap(b.data), budget), 1<<20))
		copy(grown, b.data)
		b.data = grown
		if n := len(b.idx); n > 0 {
			b.lastKey = b.keyAt(b.idx[n-1]) // point into the new array
		}
	}
	off := len(b.data)
	b.data = append(b.data, b.scratch...)
	b.idx = append(b.idx, uint32(off))
	key := b.data[off+1 : off+1+len(r.Key)]
	if b.sorted && b.lastKey != nil && bytes.Compare(key, b.lastKey) < 0 {
		b.sorted = false
	}
	b.lastKey = key
}

func (b *Buffer) keyAt(off uint32) []byte {
	return b.data[off+1 : off+1+uint32(b.data[off])]
}

// Sort orders the records by key, equal keys in arrival order (offsets grow
// with arrival).
func (b *Buffer) Sort() {
	if b.sorted {
		return
	}
	slices.SortFunc(b.idx, func(x, y uint32) int {
		if c := bytes.Compare(b.keyAt(x), b.keyAt(y)); c != 0 {
			return c
		}
		if x < y {
			return -1
		}
		return 1
	})
	b.sorted = true
}

// Spill sorts the records and writes them to a new file in dir.
func (b *Buffer) Spill(dir string, n int) (string, error) {
	b.Sort()
	path := filepath.Join(dir, fmt.Sprintf("run-%05d", n))
	f, err := os.Create(path)
	if err != nil {
		return "", fmt.Errorf("write sort run: %w", err)
	}
	w := bufio.NewWriterSize(f, 1<<20)
	var r Record
	for _, off := range b.idx {
		k, err := parseRecord(b.data[off:], &r)
		if err != nil {
			f.Close()
			return "", err
		}
		if _, err := w.Write(b.data[off : int(off)+k]); err != nil {
			f.Close()
			return "", fmt.Errorf("write sort run %s: %w", path, err)
		}
	}
	if err := w.Flush(); err != nil {
		f.Close()
		return "", fmt.Errorf("write sort run %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return "", fmt.Errorf("write sort run %s: %w", path, err)
	}
	return path, nil
}

// MergeFiles merges the sorted runs at paths into one new run at path, keeping
// every record, and removes the inputs.
func MergeFiles(ctx context.Context, paths []string, path string) (string, error) {
	var cursors []Cursor
	for _, p := range paths {
		c, err := OpenRun(p)
		if err != nil {
			return "", err
		}
		defer c.Close()
		cursors = append(cursors, c)
	}
	f, err := os.Create(path)
	if err != nil {
		return "", fmt.Errorf("write sort run: %w", err)
	}
	defer f.Close()
	w := bufio.NewWriterSize(f, 1<<20)
	m := NewMerger(cursors)
	var buf []byte
	for n := 0; ; n++ {
		if n%checkEvery == 0 {
			if err := ctx.Err(); err != nil {
				return "", err
			}
		}
		r, err := m.Next()
		if err != nil {
			return "", err
		}
		if r == nil {
			break
		}
		buf = appendRecord(buf[:0], r)
		if _, err := w.Write(buf); err != nil {
			return "", fmt.Errorf("write sort run %s: %w", path, err)
		}
	}
	if err := w.Flush(); err != nil {
		return "", fmt.Errorf("write sort run %s: %w", path, err)
	}
	if err := f.Close(); err != nil {
		return "", fmt.Errorf("write sort run %s: %w", path, err)
	}
	for _, p := range paths {
		os.Remove(p)
	}
	return path, nil
}

// A Cursor walks one sorted run: Next moves to the next record, false at the
// end; Rec is the current record, valid until the next call of Next.
type Cursor interface {
	Next() (bool, error)
	Rec() *Record
}

// memCursor walks a sorted Buffer.
type memCursor struct {
	b *Buffer
	i int
	r Record
}

func (c *memCursor) Next() (bool, error) {
	if c.i >= len(c.b.idx) {
		return false, nil
	}
	off := c.b.idx[c.i]
	c.i++
	_, err := parseRecord(c.b.data[off:], &c.r)
	return err == nil, err
}

func (c *memCursor) Rec() *Record { return &c.r }

// FileCursor reads a spilled run.
type FileCursor struct {
	f    *os.File
	br   *bufio.Reader
	path string
	buf  []byte
	r    Record
}

// OpenRun opens the spilled run at path; the caller closes it.
func OpenRun(path string) (*FileCursor, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("read sort run: %w", err)
	}
	return &FileCursor{f: f, br: bufio.NewReaderSize(f, 256<<10), path: path}, nil
}

func (c *FileCursor) Next() (bool, error) {
	kl, err := c.br.ReadByte()
	if err == io.EOF {
		return false, nil
	}
	if err != nil {
		return false, fmt.Errorf("read sort run %s: %w", c.path, err)
	}
	c.buf = append(c.buf[:0], kl)
	c.buf = slices.Grow(c.buf, int(kl))[:1+int(kl)]
	if _, err := io.ReadFull(c.br, c.buf[1:]); err != nil {
		return false, fmt.Errorf("read sort run %s: %w: %w", c.path, ErrCorrupt, err)
	}
	vl, err := binary.ReadUvarint(c.br)
	if err != nil || vl > 1<<30 {
		return false, fmt.Errorf("read sort run %s: %w", c.path, ErrCorrupt)
	}
	c.buf = binary.AppendUvarint(c.buf, vl)
	start := len(c.buf)
	c.buf = slices.Grow(c.buf, int(vl))[:start+int(vl)]
	if _, err := io.ReadFull(c.br, c.buf[start:]); err != nil {
		return false, fmt.Errorf("read sort run %s: %w: %w", c.path, ErrCorrupt, err)
	}
	for range 6 {
		v, err := binary.ReadUvarint(c.br)
		if err != nil {
			return false, fmt.Errorf("read sort run %s: %w", c.path, ErrCorrupt)
		}
		c.buf = binary.AppendUvarint(c.buf, v)
	}
	if _, err := parseRecord(c.buf, &c.r); err != nil {
		return false, fmt.Errorf("read sort run %s: %w", c.path, err)
	}
	return true, nil
}

func (c *FileCursor) Rec() *Record { return &c.r }

// Close closes the run's file.
func (c *FileCursor) Close() error { return c.f.Close() }

// mergeHeap orders cursors by their current record: key, then seq.
type mergeHeap []Cursor

func (h mergeHeap) Len() int { return len(h) }
func (h mergeHeap) Less(i, j int) bool {
	a, b := h[i].Rec(), h[j].Rec()
	if c := bytes.Compare(a.Key, b.Key); c != 0 {
		return c < 0
	}
	return a.Seq < b.Seq
}
func (h mergeHeap) Swap(i, j int) { h[i], h[j] = h[j], h[i] }
func (h *mergeHeap) Push(x any)   { *h = append(*h, x.(Cursor)) }
func (h *mergeHeap) Pop() any {
	old := *h
	c := old[len(old)-1]
	*h = old[:len(old)-1]
	return c
}

// Merger yields the records of several sorted runs in (key, seq) order.
type Merger struct {
	h       mergeHeap
	started bool
}

// NewMerger merges the runs of cursors.
func NewMerger(cursors []Cursor) *Merger {
	return &Merger{h: cursors}
}

// Next returns the next record, valid until the following call, or nil at
// the end.
func (m *Merger) Next() (*Record, error) {
	if !m.started {
		m.started = true
		live := m.h[:0]
		for _, c := range m.h {
			ok, err := c.Next()
			if err != nil {
				return nil, err
			}
			if ok {
				live = append(live, c)
			}
		}
		m.h = live
		heap.Init(&m.h)
	} else if len(m.h) > 0 {
		ok, err := m.h[0].Next()
		switch {
		case err != nil:
			return nil, err
		case ok:
			heap.Fix(&m.h, 0)
		default:
			heap.Pop(&m.h)
		}
	}
	if len(m.h) == 0 {
		return nil, nil
	}
	return m.h[0].Rec(), nil
}
