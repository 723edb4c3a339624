package layers

import (
	"encoding/binary"
	"fmt"
	"math"
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
// ascending).
type nodeFileWriter struct {
	*tableWriter
	lastID int64
	rec    [nodeRecLen]byte
}

// newNodeFileWriter creates the table's file in dir ("" means os.TempDir()).
func newNodeFileWriter(dir string) (*nodeFileWriter, error) {
	w, err := newTableWriter(dir, "loadwake-nodes-*.bin", "node position table", nodeRecLen)
	if err != nil {
		return nil, err
	}
	return &nodeFileWriter{tableWriter: w, lastID: math.MinInt64}, nil
}

// add appends one node version. Versions must come id ascending; the binary
// search depends on it.
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
	return w.write(w.rec[:])
}

// finish maps the finished table.
func (w *nodeFileWriter) finish() (*nodePositions, error) {
	t, err := w.tableWriter.finish()
	if err != nil {
		return nil, err
	}
	return &nodePositions{t}, nil
}

// nodePositions is the node position table: every node version's id,
// timestamp and position, sorted by id (versions of one id in version order).
type nodePositions struct{ *sortedTable }

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
	for ; i < t.n && t.key(i) == want; i++ {
		if int64(binary.LittleEndian.Uint64(t.rec(i)[8:])) <= sec {
			last = i
		}
	}
	if last < 0 {
		return orb.Point{}, false
	}
	r := t.rec(last)
	lon := int32(binary.LittleEndian.Uint32(r[16:]))
	lat := int32(binary.LittleEndian.Uint32(r[20:]))
	if lat == deletedLat {
		return orb.Point{}, false
	}
	return orb.Point{float64(lon) / coordScale, float64(lat) / coordScale}, true
}

// close unmaps the table.
func (t *nodePositions) close() error {
	if t == nil {
		return nil
	}
	return t.sortedTable.close()
}

// size is the table's size in bytes; 0 for nil.
func (t *nodePositions) size() int64 {
	if t == nil {
		return 0
	}
	return t.sortedTable.size()
}

// release drops the table's pages from the resident set; nil does nothing.
func (t *nodePositions) release() {
	if t != nil {
		t.sortedTable.release()
	}
}
