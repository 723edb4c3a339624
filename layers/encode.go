package layers

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// ErrCorrupt is returned when a stored event or index entry cannot be decoded.
var ErrCorrupt = errors.New("layers: corrupt derived record")

// ErrNotClassified is returned by Summarize when no classification pass has
// been recorded in the store.
var ErrNotClassified = errors.New("layers: store not classified yet (run the classification pass)")

// Key prefixes of the derived area this package owns; doc.go describes them.
var (
	prefixEvent     = []byte("d|E|")
	prefixChangeset = []byte("d|X|")
	prefixFirstEdit = []byte("d|U|")
	prefixNodeWays  = []byte("d|W|") // no longer written; dropped by a new pass
	keyMeta         = []byte("d|meta|classify")
)

const (
	objKeyLen   = 1 + 8 + 4 + 1 // type, id, version, layer
	eventKeyLen = 4 + 8 + objKeyLen
	csKeyLen    = 4 + 8 + 8 + objKeyLen
)

// timeKey maps unix seconds to 8 bytes that sort like the signed number.
func timeKey(t time.Time) uint64 { return uint64(t.Unix()) ^ (1 << 63) }

func keyTime(u uint64) time.Time { return time.Unix(int64(u^(1<<63)), 0).UTC() }

func typeByte(t osm.Type) byte {
	switch t {
	case osm.TypeNode:
		return 'n'
	case osm.TypeWay:
		return 'w'
	case osm.TypeRelation:
		return 'r'
	}
	return '?'
}

func byteType(b byte) (osm.Type, bool) {
	switch b {
	case 'n':
		return osm.TypeNode, true
	case 'w':
		return osm.TypeWay, true
	case 'r':
		return osm.TypeRelation, true
	}
	return "", false
}

// appendObjKey appends type, id, version and layer.
func appendObjKey(b []byte, e *Event) []byte {
	b = append(b, typeByte(e.Object.Type()))
	b = binary.BigEndian.AppendUint64(b, uint64(e.Object.Ref()))
	b = binary.BigEndian.AppendUint32(b, uint32(e.Object.Version()))
	return append(b, byte(e.Layer))
}

// eventKey returns d|E|time|type|id|version|layer.
func eventKey(b []byte, e *Event) []byte {
	b = append(b, prefixEvent...)
	b = binary.BigEndian.AppendUint64(b, timeKey(e.Time))
	return appendObjKey(b, e)
}

// changesetKey returns d|X|changeset|time|type|id|version|layer.
func changesetKey(b []byte, e *Event) []byte {
	b = append(b, prefixChangeset...)
	b = binary.BigEndian.AppendUint64(b, uint64(e.Changeset))
	b = binary.BigEndian.AppendUint64(b, timeKey(e.Time))
	return appendObjKey(b, e)
}

// eventKeyFromChangesetKey rebuilds the d|E| key an index entry points at.
func eventKeyFromChangesetKey(k []byte) ([]byte, error) {
	if len(k) != csKeyLen {
		return nil, fmt.Errorf("%w: changeset index key of %d bytes", ErrCorrupt, len(k))
	}
	out := make([]byte, 0, eventKeyLen)
	out = append(out, prefixEvent...)
	return append(out, k[4+8:]...), nil
}

// Value flags.
const (
	flagLocated  = 1 << 0
	flagDistance = 1 << 1
)

// coordScale is the fixed-point scale of stored positions: 1e-7 degree, the
// precision of OSM's own coordinates (OSM API 0.6, common practice).
const coordScale = 1e7

// encodeValue appends the compact value of an event (everything the key does
// not hold).
func encodeValue(b []byte, e *Event) []byte {
	var flags byte
	if e.Located {
		flags |= flagLocated
	}
	if e.Distance != 0 {
		flags |= flagDistance
	}
	b = append(b, flags, byte(e.Geometry))
	b = binary.AppendUvarint(b, uint64(e.Changeset))
	b = binary.AppendVarint(b, int64(e.UID))
	b = appendString(b, e.Class)
	if flags&flagDistance != 0 {
		b = binary.BigEndian.AppendUint64(b, math.Float64bits(e.Distance))
	}
	if flags&flagLocated != 0 {
		b = binary.BigEndian.AppendUint32(b, uint32(int32(math.Round(e.Location[0]*coordScale))))
		b = binary.BigEndian.AppendUint32(b, uint32(int32(math.Round(e.Location[1]*coordScale))))
	}
	b = binary.AppendUvarint(b, uint64(len(e.Keys)))
	for _, k := range e.Keys {
		b = appendString(b, k.Key)
		b = appendString(b, k.Family)
		c := byte(k.Change)
		if k.Provenance {
			c |= 0x80
		}
		b = append(b, c)
	}
	return b
}

func appendString(b []byte, s string) []byte {
	b = binary.AppendUvarint(b, uint64(len(s)))
	return append(b, s...)
}

// decodeEvent decodes an event from its d|E| key and value into e. It copies
// what it keeps, so key and value may be reused afterwards.
func decodeEvent(key, val []byte, e *Event) error {
	if len(key) != eventKeyLen {
		return fmt.Errorf("%w: event key of %d bytes", ErrCorrupt, len(key))
	}
	k := key[len(prefixEvent):]
	t, ok := byteType(k[8])
	if !ok {
		return fmt.Errorf("%w: event key with object type %q", ErrCorrupt, k[8])
	}
	*e = Event{
		Time:  keyTime(binary.BigEndian.Uint64(k[:8])),
		Layer: Layer(k[8+1+8+4]),
	}
	id := int64(binary.BigEndian.Uint64(k[9:17]))
	v := int(binary.BigEndian.Uint32(k[17:21]))
	switch t {
	case osm.TypeNode:
		e.Object = osm.NodeID(id).ObjectID(v)
	case osm.TypeWay:
		e.Object = osm.WayID(id).ObjectID(v)
	case osm.TypeRelation:
		e.Object = osm.RelationID(id).ObjectID(v)
	}
	d := decoder{b: val}
	flags := d.byte()
	e.Geometry = GeometryChange(d.byte())
	e.Changeset = osm.ChangesetID(d.uvarint())
	e.UID = osm.UserID(d.varint())
	e.Class = d.string()
	if flags&flagDistance != 0 {
		e.Distance = math.Float64frombits(d.uint64())
	}
	if flags&flagLocated != 0 {
		lon := int32(d.uint32())
		lat := int32(d.uint32())
		e.Location = orb.Point{float64(lon) / coordScale, float64(lat) / coordScale}
		e.Located = true
	}
	n := d.uvarint()
	if d.err == nil && n > uint64(len(val)) {
		d.err = ErrCorrupt
	}
	if n > 0 && d.err == nil {
		e.Keys = make([]KeyTouch, n)
		for i := range e.Keys {
			e.Keys[i].Key = d.string()
			e.Keys[i].Family = d.string()
			c := d.byte()
			e.Keys[i].Change = KeyChange(c &^ 0x80)
			e.Keys[i].Provenance = c&0x80 != 0
		}
	}
	if d.err != nil {
		return fmt.Errorf("%w: event value of %s at %s", ErrCorrupt, e.Object, e.Time.Format(time.RFC3339))
	}
	return nil
}

// decoder reads a value; the first failure sticks in err.
type decoder struct {
	b   []byte
	err error
}

func (d *decoder) fail() { d.err, d.b = ErrCorrupt, nil }

func (d *decoder) byte() byte {
	if len(d.b) < 1 {
		d.fail()
		return 0
	}
	c := d.b[0]
	d.b = d.b[1:]
	return c
}

func (d *decoder) uint32() uint32 {
	if len(d.b) < 4 {
		d.fail()
		return 0
	}
	v := binary.BigEndian.Uint32(d.b)
	d.b = d.b[4:]
	return v
}

func (d *decoder) uint64() uint64 {
	if len(d.b) < 8 {
		d.fail()
		return 0
	}
	v := binary.BigEndian.Uint64(d.b)
	d.b = d.b[8:]
	return v
}

func (d *decoder) uvarint() uint64 {
	v, n := binary.Uvarint(d.b)
	if n <= 0 {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return v
}

func (d *decoder) varint() int64 {
	v, n := binary.Varint(d.b)
	if n <= 0 {
		d.fail()
		return 0
	}
	d.b = d.b[n:]
	return v
}

func (d *decoder) string() string {
	n := d.uvarint()
	if n > uint64(len(d.b)) {
		d.fail()
		return ""
	}
	s := string(d.b[:n])
	d.b = d.b[n:]
	return s
}
