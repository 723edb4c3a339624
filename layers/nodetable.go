package layers

import (
	"math"
	"sort"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// DefaultNodeTable is how many node versions the pass keeps in memory to place
// ways and relations without a store lookup per node: about 24 bytes each,
// so 96 MiB at most.
const DefaultNodeTable = 4 << 20

// nodeEntry is one node version in the table: 24 bytes.
type nodeEntry struct {
	id       int64
	ts       int64 // unix seconds
	lon, lat int32 // 1e-7 degree; lat == deletedLat for a deletion
}

const deletedLat = math.MinInt32

// nodeTable holds the positions of every version of the nodes with the lowest
// ids, filled in id and version order by the node pass up to a fixed number of
// entries. It answers NodeAt exactly for ids up to covered; larger ids go to
// the store. Memory is bounded by the limit, not by the data. Entries live in
// fixed-size chunks, so growing never copies.
type nodeTable struct {
	limit   int
	chunk   int // entries per chunk
	n       int
	chunks  [][]nodeEntry
	covered int64 // every version of every node id <= covered is in the table
	full    bool
	curID   int64 // id whose versions are being added
}

const nodeChunk = 1 << 16

func newNodeTable(limit int) *nodeTable {
	return &nodeTable{limit: limit, chunk: nodeChunk, covered: -1 << 63, curID: -1 << 63}
}

// add records one node version; versions arrive id ascending, then version
// ascending. Once the limit is reached the table stops at an id boundary.
func (t *nodeTable) add(n *osm.Node) {
	if t.full {
		return
	}
	id := int64(n.ID)
	if id != t.curID {
		// the previous id is complete
		t.covered = t.curID
		if t.n >= t.limit {
			t.full = true
			return
		}
		t.curID = id
	}
	e := nodeEntry{id: id, ts: n.Timestamp.Unix(), lat: deletedLat}
	if n.Visible {
		e.lon = int32(math.Round(n.Lon * coordScale))
		e.lat = int32(math.Round(n.Lat * coordScale))
	}
	if len(t.chunks) == 0 || len(t.chunks[len(t.chunks)-1]) == t.chunk {
		t.chunks = append(t.chunks, make([]nodeEntry, 0, t.chunk))
	}
	last := &t.chunks[len(t.chunks)-1]
	*last = append(*last, e)
	t.n++
}

// done marks the end of the node scan: the last id is complete too.
func (t *nodeTable) done() {
	if !t.full {
		t.covered = math.MaxInt64
	}
}

// at answers NodeAt from the table; known is false when the id is beyond the
// covered range and the store must be asked.
func (t *nodeTable) at(id osm.NodeID, at time.Time) (p orb.Point, ok, known bool) {
	if int64(id) > t.covered {
		return orb.Point{}, false, false
	}
	want := int64(id)
	// first chunk whose last entry is >= id, then the first entry >= id in it
	c := sort.Search(len(t.chunks), func(i int) bool { ch := t.chunks[i]; return ch[len(ch)-1].id >= want })
	if c == len(t.chunks) {
		return orb.Point{}, false, true
	}
	ch := t.chunks[c]
	i := sort.Search(len(ch), func(i int) bool { return ch[i].id >= want })
	sec := at.Unix()
	var last *nodeEntry
	for c < len(t.chunks) {
		ch = t.chunks[c]
		for ; i < len(ch) && ch[i].id == want; i++ {
			if ch[i].ts <= sec {
				last = &ch[i]
			}
		}
		if i < len(ch) {
			break
		}
		c, i = c+1, 0 // this id's versions may continue in the next chunk
	}
	if last == nil || last.lat == deletedLat {
		return orb.Point{}, false, true
	}
	return orb.Point{float64(last.lon) / coordScale, float64(last.lat) / coordScale}, true, true
}
