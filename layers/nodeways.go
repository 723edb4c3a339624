package layers

import (
	"bufio"
	"container/heap"
	"context"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"sync"

	"github.com/paulmach/osm"
)

// nodeWayRecLen is the size of one record of the node→way table: node id and
// way id, int64 little-endian each.
const nodeWayRecLen = 16

// defaultNodeWayRun is how many (node, way) pairs the node→way table's
// external sort holds in memory at once: 16 MiB.
const defaultNodeWayRun = 1 << 20

// nodeWayPair is one entry of the node→way table.
type nodeWayPair struct{ node, way int64 }

func comparePairs(a, b nodeWayPair) int {
	if a.node != b.node {
		if a.node < b.node {
			return -1
		}
		return 1
	}
	if a.way != b.way {
		if a.way < b.way {
			return -1
		}
		return 1
	}
	return 0
}

// nodeWayTable is the node→way table: every (node, way) pair such that some
// version of the way held the node, once, sorted by node then way.
type nodeWayTable struct{ *sortedTable }

// ways calls fn with the ids of the ways that ever held node id, ascending.
// *hint is updated for the next call.
func (t *nodeWayTable) ways(id osm.NodeID, hint *int, fn func(osm.WayID)) {
	want := int64(id)
	i := t.search(want, *hint)
	*hint = i
	for ; i < t.n && t.key(i) == want; i++ {
		fn(osm.WayID(int64(binary.LittleEndian.Uint64(t.rec(i)[8:]))))
	}
}

// nodeWayIndex builds the node→way table on first use; the classifying
// goroutines share it and wait while one builds it.
type nodeWayIndex struct {
	dir    string // temporary files; "" means os.TempDir()
	runLen int    // pairs sorted in memory at once

	mu    sync.Mutex
	table *nodeWayTable
}

// get returns the table, building it with one scan over every way version
// unless it has been built.
func (x *nodeWayIndex) get(ctx context.Context, src Source) (*nodeWayTable, error) {
	x.mu.Lock()
	defer x.mu.Unlock()
	if x.table != nil {
		return x.table, nil
	}
	t, err := buildNodeWays(ctx, src, x.dir, x.runLen)
	if err != nil {
		return nil, err
	}
	x.table = t
	return t, nil
}

// size is the table's size in bytes, 0 before it is built or while it is
// being built.
func (x *nodeWayIndex) size() int64 {
	if !x.mu.TryLock() {
		return 0
	}
	defer x.mu.Unlock()
	if x.table == nil {
		return 0
	}
	return x.table.size()
}

// release drops the table's pages from the resident set unless it is being
// built.
func (x *nodeWayIndex) release() {
	if x.mu.TryLock() {
		if x.table != nil {
			x.table.release()
		}
		x.mu.Unlock()
	}
}

// close unmaps the table if it was built.
func (x *nodeWayIndex) close() error {
	if x.table == nil {
		return nil
	}
	err := x.table.close()
	x.table = nil
	return err
}

// buildNodeWays writes the node→way table by an external sort: the pairs of
// every way version's node list are collected runLen at a time, sorted and
// written to run files, and the runs are merged, dropping repeats, into the
// table. Memory is bounded by runLen, not by the history.
func buildNodeWays(ctx context.Context, src Source, dir string, runLen int) (*nodeWayTable, error) {
	buf := make([]nodeWayPair, 0, runLen)
	bw := bufio.NewWriterSize(nil, min(1<<20, max(16, runLen*nodeWayRecLen)))
	var runs []*os.File
	defer func() {
		for _, f := range runs {
			f.Close()
			os.Remove(f.Name())
		}
	}()
	spill := func() error {
		buf = sortUnique(buf)
		f, err := os.CreateTemp(dir, "loadwake-nodeways-run-*.bin")
		if err != nil {
			return err
		}
		runs = append(runs, f)
		bw.Reset(f)
		var rec [nodeWayRecLen]byte
		for _, p := range buf {
			putPair(rec[:], p)
			bw.Write(rec[:])
		}
		buf = buf[:0]
		if err := bw.Flush(); err != nil {
			return err
		}
		_, err = f.Seek(0, io.SeekStart)
		return err
	}
	err := src.ScanVersions(ctx, osm.TypeWay, func(o osm.Object) error {
		w, ok := o.(*osm.Way)
		if !ok {
			return nil
		}
		for _, wn := range w.Nodes {
			if len(buf) == cap(buf) {
				if err := spill(); err != nil {
					return err
				}
			}
			buf = append(buf, nodeWayPair{int64(wn.ID), int64(w.ID)})
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("node-way table: %w", err)
	}
	out, err := newTableWriter(dir, "loadwake-nodeways-*.bin", "node-way table", nodeWayRecLen)
	if err != nil {
		return nil, err
	}
	var rec [nodeWayRecLen]byte
	if len(runs) == 0 {
		for _, p := range sortUnique(buf) {
			putPair(rec[:], p)
			if err = out.write(rec[:]); err != nil {
				break
			}
		}
	} else {
		if len(buf) > 0 {
			err = spill()
		}
		if err == nil {
			err = mergeRuns(ctx, runs, min(64<<10, max(16, runLen*nodeWayRecLen)), func(p nodeWayPair) error {
				putPair(rec[:], p)
				return out.write(rec[:])
			})
		}
	}
	if err != nil {
		out.abort()
		return nil, fmt.Errorf("node-way table: %w", err)
	}
	t, err := out.finish()
	if err != nil {
		return nil, err
	}
	return &nodeWayTable{t}, nil
}

func putPair(rec []byte, p nodeWayPair) {
	binary.LittleEndian.PutUint64(rec[0:], uint64(p.node))
	binary.LittleEndian.PutUint64(rec[8:], uint64(p.way))
}

// sortUnique sorts ps and drops repeats.
func sortUnique(ps []nodeWayPair) []nodeWayPair {
	slices.SortFunc(ps, comparePairs)
	return slices.Compact(ps)
}

// runReader reads one sorted run.
type runReader struct {
	r   *bufio.Reader
	cur nodeWayPair
	rec [nodeWayRecLen]byte
}

func (r *runReader) next() (bool, error) {
	if _, err := io.ReadFull(r.r, r.rec[:]); err != nil {
		if errors.Is(err, io.EOF) {
			return false, nil
		}
		return false, err
	}
	r.cur = nodeWayPair{int64(binary.LittleEndian.Uint64(r.rec[0:])), int64(binary.LittleEndian.Uint64(r.rec[8:]))}
	return true, nil
}

// runHeap orders the runs by their current pair.
type runHeap []*runReader

func (h runHeap) Len() int           { return len(h) }
func (h runHeap) Less(i, j int) bool { return comparePairs(h[i].cur, h[j].cur) < 0 }
func (h runHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *runHeap) Push(x any)        { *h = append(*h, x.(*runReader)) }
func (h *runHeap) Pop() any {
	old := *h
	r := old[len(old)-1]
	*h = old[:len(old)-1]
	return r
}

// mergeRuns calls fn with every distinct pair of the sorted runs, in order,
// reading each run through a buffer of bufSize bytes.
func mergeRuns(ctx context.Context, runs []*os.File, bufSize int, fn func(nodeWayPair) error) error {
	h := make(runHeap, 0, len(runs))
	for _, f := range runs {
		r := &runReader{r: bufio.NewReaderSize(f, bufSize)}
		ok, err := r.next()
		if err != nil {
			return err
		}
		if ok {
			h = append(h, r)
		}
	}
	heap.Init(&h)
	var last nodeWayPair
	first := true
	for n := 0; len(h) > 0; n++ {
		if n%(64<<10) == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		r := h[0]
		if first || r.cur != last {
			if err := fn(r.cur); err != nil {
				return err
			}
			last, first = r.cur, false
		}
		ok, err := r.next()
		if err != nil {
			return err
		}
		if ok {
			heap.Fix(&h, 0)
		} else {
			heap.Pop(&h)
		}
	}
	return nil
}
