package layers

import (
	"bufio"
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"os"
	"sort"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// nodeRecLen is the size of one record of the node position table:
// id int64, unix seconds int64, lon and lat int32 in 1e-7 degree, all
// little-endian.
const nodeRecLen = 24

// deletedLat marks a deletion in a record's lat field; no position has it.
const deletedLat = math.MinInt32

// nodeFileWriter writes the node position table: one record per node version,
// in the order the node scan delivers them (id ascending, then version
// ascending), to a temporary file.
type nodeFileWriter struct {
	f      *os.File
	w      *bufio.Writer
	n      int
	lastID int64
	rec    [nodeRecLen]byte
}

// newNodeFileWriter creates the table's file in dir ("" means os.TempDir()).
func newNodeFileWriter(dir string) (*nodeFileWriter, error) {
	f, err := os.CreateTemp(dir, "loadwake-nodes-*.bin")
	if err != nil {
		return nil, fmt.Errorf("node position table: %w", err)
	}
	return &nodeFileWriter{f: f, w: bufio.NewWriterSize(f, 1<<20), lastID: math.MinInt64}, nil
}

// add appends one node version. Versions must come id ascending; the binary
// search of nodePositions depends on it.
func (w *nodeFileWriter) add(n *osm.Node) error {
	id := int64(n.ID)
	if id < w.lastID {
		return fmt.Errorf("node position table %s: node/%d after node/%d: scan out of id order", w.f.Name(), id, w.lastID)
	}
	w.lastID = id
	lon, lat := int32(0), int32(deletedLat)
	if n.Visible {
		lon = int32(math.Round(n.Lon * coordScale))
		lat = int32(math.Round(n.Lat * coordScale))
	}
	binary.LittleEndian.PutUint64(w.rec[0:], uint64(id))
	binary.LittleEndian.PutUint64(w.rec[8:], uint64(n.Timestamp.Unix()))
	binary.LittleEndian.PutUint32(w.rec[16:], uint32(lon))
	binary.LittleEndian.PutUint32(w.rec[20:], uint32(lat))
	if _, err := w.w.Write(w.rec[:]); err != nil {
		return fmt.Errorf("node position table %s: %w", w.f.Name(), err)
	}
	w.n++
	return nil
}

// finish flushes the file, maps it for reading and removes its name, so that
// nothing is left behind once the table is closed.
func (w *nodeFileWriter) finish() (*nodePositions, error) {
	name := w.f.Name()
	err := w.w.Flush()
	var data []byte
	var unmap func() error
	if err == nil {
		data, unmap, err = mapFile(w.f, int64(w.n)*nodeRecLen)
	}
	err = errors.Join(err, w.f.Close(), os.Remove(name))
	if err != nil {
		if unmap != nil {
			err = errors.Join(err, unmap())
		}
		return nil, fmt.Errorf("node position table %s: %w", name, err)
	}
	return &nodePositions{data: data, n: w.n, unmap: unmap}, nil
}

// abort closes and removes the file after a failed scan.
func (w *nodeFileWriter) abort() {
	w.f.Close()
	os.Remove(w.f.Name())
}

// nodePositions is the node position table, read-only once written: every
// node version's id, timestamp and position, sorted by id (versions of one id
// in version order), in a memory-mapped file. NodeAt is a binary search, so
// the process holds no per-node memory: the kernel pages the file in and out
// like any cached file. Safe for concurrent use; each caller passes its own
// search hint.
type nodePositions struct {
	data  []byte
	n     int
	unmap func() error
}

func (t *nodePositions) id(i int) int64 {
	return int64(binary.LittleEndian.Uint64(t.data[i*nodeRecLen:]))
}

// search returns the index of the first record with an id not below want. It
// gallops out from hint, the index a previous search returned, since the nodes
// of one way mostly have nearby ids; a hint out of range searches everything.
func (t *nodePositions) search(want int64, hint int) int {
	lo, hi := 0, t.n // the answer lies in [lo, hi]
	if hint >= 0 && hint < t.n {
		if t.id(hint) < want {
			lo = hint + 1
			for step := 1; ; step *= 2 {
				j := hint + step
				if j >= t.n {
					break
				}
				if t.id(j) >= want {
					hi = j
					break
				}
				lo = j + 1
			}
		} else {
			hi = hint
			for step := 1; ; step *= 2 {
				j := hint - step
				if j < 0 {
					break
				}
				if t.id(j) < want {
					lo = j + 1
					break
				}
				hi = j
			}
		}
	}
	return lo + sort.Search(hi-lo, func(i int) bool { return t.id(lo+i) >= want })
}

// at returns the position of node id valid at time at: that of the last
// version (in version order) whose timestamp is not after at, as the store's
// NodeAt answers. ok is false when there is none or it is a deletion. *hint is
// updated for the next call.
func (t *nodePositions) at(id osm.NodeID, at time.Time, hint *int) (p orb.Point, ok bool) {
	if t == nil || t.n == 0 {
		return orb.Point{}, false
	}
	want := int64(id)
	i := t.search(want, *hint)
	*hint = i
	sec := at.Unix()
	last := -1
	for ; i < t.n && t.id(i) == want; i++ {
		if int64(binary.LittleEndian.Uint64(t.data[i*nodeRecLen+8:])) <= sec {
			last = i
		}
	}
	if last < 0 {
		return orb.Point{}, false
	}
	r := t.data[last*nodeRecLen:]
	lon := int32(binary.LittleEndian.Uint32(r[16:]))
	lat := int32(binary.LittleEndian.Uint32(r[20:]))
	if lat == deletedLat {
		return orb.Point{}, false
	}
	return orb.Point{float64(lon) / coordScale, float64(lat) / coordScale}, true
}

// close unmaps the table.
func (t *nodePositions) close() error {
	if t == nil || t.unmap == nil {
		return nil
	}
	err := t.unmap()
	t.data, t.n, t.unmap = nil, 0, nil
	return err
}
