package sim

import (
	"bufio"
	"cmp"
	"container/heap"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"time"

	"github.com/paulmach/osm"
)

// Sort keys pack type, id and version into one uint64: 2 bits of type, 40 of
// id and 22 of version, so that numeric order is the file order.
const (
	keyTypeNode uint64 = 0
	keyTypeWay  uint64 = 1
	maxKeyID           = 1<<40 - 1
	maxKeyVer          = 1<<22 - 1
)

func sortKey(typ uint64, id int64, ver int) uint64 {
	return typ<<62 | uint64(id)<<22 | uint64(ver)
}

// appendAttr appends ` name="value"` with the value escaped for XML (W3C XML
// 1.0, section 2.4 and 3.3.3: &, <, >, quotes and whitespace controls).
func appendAttr(b []byte, name, value string) []byte {
	b = append(b, ' ')
	b = append(b, name...)
	b = append(b, '=', '"')
	for i := 0; i < len(value); i++ {
		switch c := value[i]; c {
		case '&':
			b = append(b, "&amp;"...)
		case '<':
			b = append(b, "&lt;"...)
		case '>':
			b = append(b, "&gt;"...)
		case '"':
			b = append(b, "&quot;"...)
		case '\'':
			b = append(b, "&apos;"...)
		case '\n':
			b = append(b, "&#xA;"...)
		case '\r':
			b = append(b, "&#xD;"...)
		case '\t':
			b = append(b, "&#x9;"...)
		default:
			b = append(b, c)
		}
	}
	return append(b, '"')
}

func appendIntAttr(b []byte, name string, v int64) []byte {
	b = append(b, ' ')
	b = append(b, name...)
	b = append(b, '=', '"')
	b = strconv.AppendInt(b, v, 10)
	return append(b, '"')
}

const timeLayout = "2006-01-02T15:04:05Z"

func appendTimeAttr(b []byte, name string, unix int64) []byte {
	b = append(b, ' ')
	b = append(b, name...)
	b = append(b, '=', '"')
	b = time.Unix(unix, 0).UTC().AppendFormat(b, timeLayout)
	return append(b, '"')
}

// appendE7Attr writes a coordinate held in units of 1e-7 degrees with seven decimals.
func appendE7Attr(b []byte, name string, v int32) []byte {
	b = append(b, ' ')
	b = append(b, name...)
	b = append(b, '=', '"')
	u := int64(v)
	if u < 0 {
		b = append(b, '-')
		u = -u
	}
	b = strconv.AppendInt(b, u/10_000_000, 10)
	b = append(b, '.')
	frac := u % 10_000_000
	for div := int64(1_000_000); div > 0; div /= 10 {
		b = append(b, byte('0'+frac/div%10))
	}
	return append(b, '"')
}

// version is the common head of a node or way version.
type version struct {
	id      int64
	ver     int
	unix    int64
	cs      int64
	uid     int
	user    string
	visible bool
}

func appendHead(b []byte, elem string, v version) []byte {
	b = append(b, "  <"...)
	b = append(b, elem...)
	b = appendIntAttr(b, "id", v.id)
	b = appendIntAttr(b, "version", int64(v.ver))
	b = appendTimeAttr(b, "timestamp", v.unix)
	b = appendIntAttr(b, "changeset", v.cs)
	b = appendIntAttr(b, "uid", int64(v.uid))
	b = appendAttr(b, "user", v.user)
	if v.visible {
		b = append(b, ` visible="true"`...)
	} else {
		b = append(b, ` visible="false"`...)
	}
	return b
}

func appendTags(b []byte, tags osm.Tags) []byte {
	for _, t := range tags {
		b = append(b, "    <tag"...)
		b = appendAttr(b, "k", t.Key)
		b = appendAttr(b, "v", t.Value)
		b = append(b, "/>\n"...)
	}
	return b
}

// appendNode renders a node version; deleted versions carry neither position nor tags,
// as in the planet's full-history files.
func appendNode(b []byte, v version, lat, lon int32, tags osm.Tags) []byte {
	b = appendHead(b, "node", v)
	if !v.visible {
		return append(b, "/>\n"...)
	}
	b = appendE7Attr(b, "lat", lat)
	b = appendE7Attr(b, "lon", lon)
	if len(tags) == 0 {
		return append(b, "/>\n"...)
	}
	b = append(b, ">\n"...)
	b = appendTags(b, tags)
	return append(b, "  </node>\n"...)
}

// appendWay renders a way version; deleted versions carry neither nodes nor tags.
func appendWay(b []byte, v version, nodes []uint32, tags osm.Tags) []byte {
	b = appendHead(b, "way", v)
	if !v.visible {
		return append(b, "/>\n"...)
	}
	b = append(b, ">\n"...)
	for _, n := range nodes {
		b = append(b, `    <nd ref="`...)
		b = strconv.AppendUint(b, uint64(n), 10)
		b = append(b, "\"/>\n"...)
	}
	b = appendTags(b, tags)
	return append(b, "  </way>\n"...)
}

// runWriter collects rendered versions and spills them to sorted run files
// when the buffer passes limit bytes; merge writes all runs in key order.
type runWriter struct {
	dir   string
	limit int
	buf   []byte
	idx   []runRec
	runs  []string
}

type runRec struct {
	key      uint64
	off, end uint32
}

// add records the element rendered into w.buf from start on under key.
func (w *runWriter) add(key uint64, start int) {
	w.idx = append(w.idx, runRec{key: key, off: uint32(start), end: uint32(len(w.buf))})
}

func (w *runWriter) full() bool { return len(w.buf) >= w.limit }

// spill sorts the buffered versions and writes them to a new run file.
func (w *runWriter) spill() error {
	if len(w.idx) == 0 {
		return nil
	}
	slices.SortFunc(w.idx, func(a, b runRec) int { return cmp.Compare(a.key, b.key) })
	name := filepath.Join(w.dir, fmt.Sprintf("run-%05d", len(w.runs)))
	f, err := os.Create(name)
	if err != nil {
		return fmt.Errorf("sim: write run %s: %w", name, err)
	}
	bw := bufio.NewWriterSize(f, 1<<20)
	var hdr [8 + binary.MaxVarintLen64]byte
	for _, r := range w.idx {
		binary.BigEndian.PutUint64(hdr[:8], r.key)
		n := binary.PutUvarint(hdr[8:], uint64(r.end-r.off))
		bw.Write(hdr[:8+n])
		bw.Write(w.buf[r.off:r.end])
	}
	err = bw.Flush()
	if cerr := f.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return fmt.Errorf("sim: write run %s: %w", name, err)
	}
	w.runs = append(w.runs, name)
	w.buf = w.buf[:0]
	w.idx = w.idx[:0]
	return nil
}

type runReader struct {
	r   *bufio.Reader
	f   *os.File
	key uint64
	rec []byte
}

func (rr *runReader) next() (bool, error) {
	var k [8]byte
	if _, err := io.ReadFull(rr.r, k[:]); err != nil {
		if errors.Is(err, io.EOF) {
			return false, nil
		}
		return false, err
	}
	n, err := binary.ReadUvarint(rr.r)
	if err != nil {
		return false, err
	}
	rr.key = binary.BigEndian.Uint64(k[:])
	rr.rec = slices.Grow(rr.rec[:0], int(n))[:n]
	_, err = io.ReadFull(rr.r, rr.rec)
	return err == nil, err
}

type runHeap []*runReader

func (h runHeap) Len() int           { return len(h) }
func (h runHeap) Less(i, j int) bool { return h[i].key < h[j].key }
func (h runHeap) Swap(i, j int)      { h[i], h[j] = h[j], h[i] }
func (h *runHeap) Push(x any)        { *h = append(*h, x.(*runReader)) }
func (h *runHeap) Pop() any {
	old := *h
	x := old[len(old)-1]
	*h = old[:len(old)-1]
	return x
}

// merge spills what is left and writes every run's records to out in key order.
func (w *runWriter) merge(out io.Writer) error {
	if err := w.spill(); err != nil {
		return err
	}
	w.buf = nil
	h := make(runHeap, 0, len(w.runs))
	defer func() {
		for _, rr := range h {
			rr.f.Close()
		}
	}()
	for _, name := range w.runs {
		f, err := os.Open(name)
		if err != nil {
			return fmt.Errorf("sim: read run %s: %w", name, err)
		}
		rr := &runReader{r: bufio.NewReaderSize(f, 64<<10), f: f}
		ok, err := rr.next()
		if err != nil {
			f.Close()
			return fmt.Errorf("sim: read run %s: %w", name, err)
		}
		if !ok {
			f.Close()
			continue
		}
		h = append(h, rr)
	}
	heap.Init(&h)
	for len(h) > 0 {
		rr := h[0]
		if _, err := out.Write(rr.rec); err != nil {
			return err
		}
		ok, err := rr.next()
		if err != nil {
			return fmt.Errorf("sim: read run: %w", err)
		}
		if ok {
			heap.Fix(&h, 0)
		} else {
			rr.f.Close()
			heap.Pop(&h)
		}
	}
	return nil
}
