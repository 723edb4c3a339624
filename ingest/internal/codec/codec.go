package codec

import (
	"encoding/binary"
	"errors"
	"fmt"
	"math"
	"time"

	"github.com/paulmach/osm"
)

// Key prefixes of the store (see doc.go for the full layout).
const (
	PrefixVersion   = 'v'
	PrefixChangeset = 'c'
	PrefixMeta      = 'm'
	PrefixDerived   = 'd'
)

// Type bytes in version keys.
const (
	TypeNode     = 'n'
	TypeWay      = 'w'
	TypeRelation = 'r'
)

// encodingVersion is the first byte of every version and changeset value.
const encodingVersion = 1

// Lengths of the fixed-size keys.
const (
	VersionKeyLen   = 1 + 1 + 8 + 4
	ObjectPrefixLen = 1 + 1 + 8
	ChangesetKeyLen = 1 + 8
)

// ErrValue marks a stored value that cannot be decoded.
var ErrValue = errors.New("ingest: corrupt stored value")

// TypeByte returns the key byte of an OSM element type.
func TypeByte(t osm.Type) (byte, error) {
	switch t {
	case osm.TypeNode:
		return TypeNode, nil
	case osm.TypeWay:
		return TypeWay, nil
	case osm.TypeRelation:
		return TypeRelation, nil
	}
	return 0, fmt.Errorf("ingest: no versions of type %q are stored", t)
}

// TypeOfByte is the inverse of typeByte.
func TypeOfByte(b byte) osm.Type {
	switch b {
	case TypeNode:
		return osm.TypeNode
	case TypeWay:
		return osm.TypeWay
	case TypeRelation:
		return osm.TypeRelation
	}
	return ""
}

// PutID writes id big-endian with the sign bit flipped, so that negative ids
// (as in unsubmitted edits) sort before positive ones.
func PutID(b []byte, id int64) { binary.BigEndian.PutUint64(b, uint64(id)^(1<<63)) }

// GetID is the inverse of PutID.
func GetID(b []byte) int64 { return int64(binary.BigEndian.Uint64(b) ^ (1 << 63)) }

// AppendVersionKey appends the key v|type|id|version to dst.
func AppendVersionKey(dst []byte, tb byte, id int64, version int) []byte {
	var k [VersionKeyLen]byte
	k[0] = PrefixVersion
	k[1] = tb
	PutID(k[2:10], id)
	binary.BigEndian.PutUint32(k[10:14], uint32(version))
	return append(dst, k[:]...)
}

// ObjectPrefix returns v|type|id, the prefix of all versions of one object.
func ObjectPrefix(tb byte, id int64) []byte {
	k := make([]byte, ObjectPrefixLen)
	k[0] = PrefixVersion
	k[1] = tb
	PutID(k[2:10], id)
	return k
}

// ChangesetKey returns c|id.
func ChangesetKey(id int64) []byte {
	k := make([]byte, ChangesetKeyLen)
	k[0] = PrefixChangeset
	PutID(k[1:], id)
	return k
}

// MetaKey returns m|name.
func MetaKey(name string) []byte { return append([]byte{PrefixMeta}, name...) }

// ParseVersionKey splits a version key; ok is false when k is not one.
func ParseVersionKey(k []byte) (tb byte, id int64, version int, ok bool) {
	if len(k) != VersionKeyLen || k[0] != PrefixVersion {
		return 0, 0, 0, false
	}
	return k[1], GetID(k[2:10]), int(binary.BigEndian.Uint32(k[10:14])), true
}

// coordinate conversion: OSM stores coordinates with 7 decimals (common practice,
// the API's fixed-point scale), so a float64 degree value is kept as round(deg*1e7).
const coordScale = 1e7

func toFixed(deg float64) int64               { return int64(math.Round(deg * coordScale)) }
func fromFixed(v int64) float64               { return float64(v) / coordScale }
func zig(v int64) uint64                      { return uint64(v<<1) ^ uint64(v>>63) }
func unzig(u uint64) int64                    { return int64(u>>1) ^ -int64(u&1) }
func appendUvarint(b []byte, v uint64) []byte { return binary.AppendUvarint(b, v) }
func appendVarint(b []byte, v int64) []byte   { return binary.AppendUvarint(b, zig(v)) }

func appendString(b []byte, s string) []byte {
	b = binary.AppendUvarint(b, uint64(len(s)))
	return append(b, s...)
}

func appendTags(b []byte, tags osm.Tags) []byte {
	b = binary.AppendUvarint(b, uint64(len(tags)))
	for _, t := range tags {
		b = appendString(b, t.Key)
		b = appendString(b, t.Value)
	}
	return b
}

// timestamps are whole seconds since the Unix epoch, zero for the zero time.
func unixOrZero(t time.Time) int64 {
	if t.IsZero() {
		return 0
	}
	return t.Unix()
}

func timeOrZero(s int64) time.Time {
	if s == 0 {
		return time.Time{}
	}
	return time.Unix(s, 0).UTC()
}

// Flags in the second byte of a version value.
const (
	flagVisible = 1 << 0
)

// AppendVersionValue appends the encoding of one object version to dst.
// The layout is documented in doc.go.
func AppendVersionValue(dst []byte, o osm.Object) ([]byte, error) {
	var (
		visible bool
		ts      time.Time
		cs      osm.ChangesetID
		uid     osm.UserID
		user    string
		tags    osm.Tags
	)
	switch o := o.(type) {
	case *osm.Node:
		visible, ts, cs, uid, user, tags = o.Visible, o.Timestamp, o.ChangesetID, o.UserID, o.User, o.Tags
	case *osm.Way:
		visible, ts, cs, uid, user, tags = o.Visible, o.Timestamp, o.ChangesetID, o.UserID, o.User, o.Tags
	case *osm.Relation:
		visible, ts, cs, uid, user, tags = o.Visible, o.Timestamp, o.ChangesetID, o.UserID, o.User, o.Tags
	default:
		return dst, fmt.Errorf("ingest: cannot store %T", o)
	}
	var flags byte
	if visible {
		flags |= flagVisible
	}
	dst = append(dst, encodingVersion, flags)
	dst = appendVarint(dst, unixOrZero(ts))
	dst = appendVarint(dst, int64(cs))
	dst = appendVarint(dst, int64(uid))
	dst = appendString(dst, user)
	dst = appendTags(dst, tags)
	switch o := o.(type) {
	case *osm.Node:
		dst = appendVarint(dst, toFixed(o.Lat))
		dst = appendVarint(dst, toFixed(o.Lon))
	case *osm.Way:
		dst = appendUvarint(dst, uint64(len(o.Nodes)))
		var prev int64
		for _, n := range o.Nodes {
			dst = appendVarint(dst, int64(n.ID)-prev)
			prev = int64(n.ID)
		}
	case *osm.Relation:
		dst = appendUvarint(dst, uint64(len(o.Members)))
		var prev int64
		for _, m := range o.Members {
			tb, err := TypeByte(m.Type)
			if err != nil {
				return dst, fmt.Errorf("ingest: relation/%d v%d member: %w", o.ID, o.Version, err)
			}
			dst = append(dst, tb)
			dst = appendVarint(dst, m.Ref-prev)
			prev = m.Ref
			dst = appendString(dst, m.Role)
		}
	}
	return dst, nil
}

// decoder reads the fields of a stored value; the first failure sticks.
type decoder struct {
	b   []byte
	err error
}

func (d *decoder) fail() {
	if d.err == nil {
		d.err = ErrValue
	}
	d.b = nil
}

func (d *decoder) byte() byte {
	if len(d.b) < 1 {
		d.fail()
		return 0
	}
	c := d.b[0]
	d.b = d.b[1:]
	return c
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

func (d *decoder) varint() int64 { return unzig(d.uvarint()) }

// count reads a length and checks it against the bytes left, each element
// taking at least min bytes, so corrupt data cannot trigger a huge allocation.
func (d *decoder) count(min int) int {
	n := d.uvarint()
	if n > uint64(len(d.b)/min) {
		d.fail()
		return 0
	}
	return int(n)
}

func (d *decoder) string() string {
	n := d.count(1)
	s := string(d.b[:n])
	d.b = d.b[n:]
	return s
}

func (d *decoder) tags() osm.Tags {
	n := d.count(2)
	if n == 0 {
		return nil
	}
	tags := make(osm.Tags, n)
	for i := range tags {
		tags[i].Key = d.string()
		tags[i].Value = d.string()
	}
	return tags
}

// versionHeader holds the fields every version value starts with.
type versionHeader struct {
	visible bool
	ts      time.Time
	cs      osm.ChangesetID
	uid     osm.UserID
	user    string
}

func (d *decoder) header() versionHeader {
	if v := d.byte(); v != encodingVersion {
		if d.err == nil {
			d.err = fmt.Errorf("%w: encoding version %d, want %d", ErrValue, v, encodingVersion)
		}
		return versionHeader{}
	}
	flags := d.byte()
	return versionHeader{
		visible: flags&flagVisible != 0,
		ts:      timeOrZero(d.varint()),
		cs:      osm.ChangesetID(d.varint()),
		uid:     osm.UserID(d.varint()),
		user:    d.string(),
	}
}

// DecodeVersion rebuilds a freshly allocated object from its key and value.
func DecodeVersion(key, val []byte) (osm.Object, error) {
	tb, id, version, ok := ParseVersionKey(key)
	if !ok {
		return nil, fmt.Errorf("%w: bad version key %x", ErrValue, key)
	}
	d := decoder{b: val}
	h := d.header()
	tags := d.tags()
	var o osm.Object
	switch tb {
	case TypeNode:
		lat := fromFixed(d.varint())
		lon := fromFixed(d.varint())
		o = &osm.Node{ID: osm.NodeID(id), Version: version, Visible: h.visible, Timestamp: h.ts,
			ChangesetID: h.cs, UserID: h.uid, User: h.user, Tags: tags, Lat: lat, Lon: lon}
	case TypeWay:
		n := d.count(1)
		var nodes osm.WayNodes
		if n > 0 {
			nodes = make(osm.WayNodes, n)
			var prev int64
			for i := range nodes {
				prev += d.varint()
				nodes[i].ID = osm.NodeID(prev)
			}
		}
		o = &osm.Way{ID: osm.WayID(id), Version: version, Visible: h.visible, Timestamp: h.ts,
			ChangesetID: h.cs, UserID: h.uid, User: h.user, Tags: tags, Nodes: nodes}
	case TypeRelation:
		n := d.count(3)
		var members osm.Members
		if n > 0 {
			members = make(osm.Members, n)
			var prev int64
			for i := range members {
				members[i].Type = TypeOfByte(d.byte())
				prev += d.varint()
				members[i].Ref = prev
				members[i].Role = d.string()
				if members[i].Type == "" {
					d.fail()
				}
			}
		}
		o = &osm.Relation{ID: osm.RelationID(id), Version: version, Visible: h.visible, Timestamp: h.ts,
			ChangesetID: h.cs, UserID: h.uid, User: h.user, Tags: tags, Members: members}
	default:
		return nil, fmt.Errorf("%w: unknown type byte %q", ErrValue, tb)
	}
	if d.err != nil {
		return nil, fmt.Errorf("%s/%d v%d: %w", TypeOfByte(tb), id, version, d.err)
	}
	return o, nil
}

// DecodeNodePosition reads only what NodeAt needs from a node value.
func DecodeNodePosition(val []byte) (ts time.Time, visible bool, lat, lon float64, err error) {
	d := decoder{b: val}
	h := d.header()
	// skip the tags
	n := d.count(2)
	for range 2 * n {
		m := d.count(1)
		d.b = d.b[m:]
	}
	lat = fromFixed(d.varint())
	lon = fromFixed(d.varint())
	return h.ts, h.visible, lat, lon, d.err
}

// Flags in the second byte of a changeset value: FlagOpen marks an open
// changeset (a closed record replaces an open one).
const (
	FlagOpen    = 1 << 0
	flagHasBBox = 1 << 1
)

// AppendChangesetValue appends the encoding of a changeset record to dst.
func AppendChangesetValue(dst []byte, c *osm.Changeset) []byte {
	var flags byte
	if c.Open {
		flags |= FlagOpen
	}
	hasBBox := c.MinLat != 0 || c.MaxLat != 0 || c.MinLon != 0 || c.MaxLon != 0
	if hasBBox {
		flags |= flagHasBBox
	}
	dst = append(dst, encodingVersion, flags)
	dst = appendVarint(dst, unixOrZero(c.CreatedAt))
	dst = appendVarint(dst, unixOrZero(c.ClosedAt))
	dst = appendUvarint(dst, uint64(max(c.ChangesCount, 0)))
	dst = appendVarint(dst, int64(c.UserID))
	dst = appendString(dst, c.User)
	if hasBBox {
		dst = appendVarint(dst, toFixed(c.MinLat))
		dst = appendVarint(dst, toFixed(c.MinLon))
		dst = appendVarint(dst, toFixed(c.MaxLat))
		dst = appendVarint(dst, toFixed(c.MaxLon))
	}
	return appendTags(dst, c.Tags)
}

// DecodeChangeset rebuilds a freshly allocated changeset from key and value.
func DecodeChangeset(key, val []byte) (*osm.Changeset, error) {
	if len(key) != ChangesetKeyLen || key[0] != PrefixChangeset {
		return nil, fmt.Errorf("%w: bad changeset key %x", ErrValue, key)
	}
	id := GetID(key[1:])
	d := decoder{b: val}
	if v := d.byte(); v != encodingVersion {
		return nil, fmt.Errorf("changeset/%d: %w: encoding version %d", id, ErrValue, v)
	}
	flags := d.byte()
	c := &osm.Changeset{
		ID:           osm.ChangesetID(id),
		Open:         flags&FlagOpen != 0,
		CreatedAt:    timeOrZero(d.varint()),
		ClosedAt:     timeOrZero(d.varint()),
		ChangesCount: int(d.uvarint()),
		UserID:       osm.UserID(d.varint()),
		User:         d.string(),
	}
	if flags&flagHasBBox != 0 {
		c.MinLat = fromFixed(d.varint())
		c.MinLon = fromFixed(d.varint())
		c.MaxLat = fromFixed(d.varint())
		c.MaxLon = fromFixed(d.varint())
	}
	c.Tags = d.tags()
	if d.err != nil {
		return nil, fmt.Errorf("changeset/%d: %w", id, d.err)
	}
	return c, nil
}

// rawBytes reads a length-prefixed string as a slice of d's bytes.
func (d *decoder) rawBytes() []byte {
	n := d.count(1)
	b := d.b[:n]
	d.b = d.b[n:]
	return b
}

// VersionSummary is what the totals need from a stored version value.
type VersionSummary struct {
	Visible  bool
	TS       int64 // Unix seconds, 0 for none
	UID      osm.UserID
	User     []byte // points into the value
	Lat, Lon float64
}

// SummarizeVersion reads the header of a version value of type tb and, for a
// node, its position, without allocating.
func SummarizeVersion(tb byte, val []byte) (VersionSummary, error) {
	d := decoder{b: val}
	if v := d.byte(); v != encodingVersion {
		return VersionSummary{}, fmt.Errorf("%w: encoding version %d, want %d", ErrValue, v, encodingVersion)
	}
	var s VersionSummary
	s.Visible = d.byte()&flagVisible != 0
	s.TS = d.varint()
	d.varint() // changeset
	s.UID = osm.UserID(d.varint())
	s.User = d.rawBytes()
	if tb == TypeNode {
		n := d.count(2)
		for range 2 * n {
			d.rawBytes()
		}
		s.Lat = fromFixed(d.varint())
		s.Lon = fromFixed(d.varint())
	}
	return s, d.err
}

// SummarizeChangeset reads the uid and user name of a changeset value.
func SummarizeChangeset(val []byte) (osm.UserID, []byte, error) {
	d := decoder{b: val}
	if v := d.byte(); v != encodingVersion {
		return 0, nil, fmt.Errorf("%w: encoding version %d, want %d", ErrValue, v, encodingVersion)
	}
	d.byte()    // flags
	d.varint()  // created_at
	d.varint()  // closed_at
	d.uvarint() // num_changes
	uid := osm.UserID(d.varint())
	user := d.rawBytes()
	return uid, user, d.err
}
