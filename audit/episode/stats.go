package episode

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"iter"
	"math"
	"slices"
	"sort"
	"time"
	"unique"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// Derived is the store's derived area as Detect uses it to keep the
// per-changeset counters between runs; *ingest.Store meets it. A Source
// without it gets the counters kept in memory for one run.
type Derived interface {
	PutDerived(ctx context.Context, fill func(put func(key, value []byte) error) error) error
	ScanDerived(ctx context.Context, prefix []byte, fn func(key, value []byte) error) error
	GetDerived(ctx context.Context, key []byte) ([]byte, bool, error)
	DropDerived(ctx context.Context, prefix []byte) error
}

// Keys this package writes in the derived area (package documentation).
var (
	prefixStats  = []byte("d|I|s|")
	keyStatsMeta = []byte("d|I|meta")
	prefixOwn    = []byte("d|I|")
)

// defaultSpill is how many changesets the version scan counts in memory
// before it writes their partial counters out: it bounds Detect's memory.
const defaultSpill = 1 << 15

// statsMeta says what the stored counters were counted from.
type statsMeta struct {
	RulesHash   string `json:"rules_hash"`
	Fingerprint string `json:"fingerprint"` // versions per type and highest changeset id, as layers' summary has it
}

// versionPrint is the fingerprint of the versions scanned, written as the
// classification pass writes its own (layers.Summary.Fingerprint), so the two
// can be compared.
type versionPrint struct {
	n, w, r, maxCS int64
}

func (f versionPrint) String() string {
	return fmt.Sprintf("nodes=%d ways=%d relations=%d max_changeset=%d", f.n, f.w, f.r, f.maxCS)
}

// statsStream returns the per-changeset counters in ascending changeset id
// order. With a store's derived area they are read from what an earlier run
// stored, when the rules and the store's classified data are the same, or
// counted once and stored; otherwise they are counted into memory.
func statsStream(ctx context.Context, src Source, r *rules.RuleSet, spill int) (iter.Seq2[*csStats, error], error) {
	d, ok := src.(Derived)
	if !ok {
		d = newMemDerived()
	}
	fresh, err := storedStatsFresh(ctx, d, r)
	if err != nil {
		return nil, err
	}
	if !fresh {
		if err := countVersions(ctx, src, d, r, spill); err != nil {
			return nil, err
		}
	}
	return readStats(ctx, d), nil
}

// storedStatsFresh reports whether the stored counters were made with r's
// hash from the data the store's last classification pass saw.
func storedStatsFresh(ctx context.Context, d Derived, r *rules.RuleSet) (bool, error) {
	b, ok, err := d.GetDerived(ctx, keyStatsMeta)
	if err != nil || !ok {
		return false, err
	}
	var m statsMeta
	if err := json.Unmarshal(b, &m); err != nil {
		return false, nil // counted again and rewritten
	}
	sum, err := layers.Summarize(ctx, d)
	if errors.Is(err, layers.ErrNotClassified) {
		return false, nil
	}
	if err != nil {
		return false, err
	}
	return m.RulesHash == r.Hash() && m.Fingerprint == sum.Fingerprint, nil
}

// countVersions reads every version once per type and stores the counters
// per changeset: at most spill changesets are counted in memory, then their
// partial counters go to the store under the changeset id and the number of
// the spill, and readStats adds the partials up.
func countVersions(ctx context.Context, src Source, d Derived, r *rules.RuleSet, spill int) error {
	if err := d.DropDerived(ctx, prefixOwn); err != nil {
		return fmt.Errorf("audit: detect imports: %w", err)
	}
	stats := make(map[osm.ChangesetID]*csStats)
	var fp versionPrint
	var spills uint32
	flush := func() error {
		if len(stats) == 0 {
			return nil
		}
		ids := make([]osm.ChangesetID, 0, len(stats))
		for id := range stats {
			ids = append(ids, id)
		}
		slices.Sort(ids)
		err := d.PutDerived(ctx, func(put func(k, v []byte) error) error {
			var k, v []byte
			for _, id := range ids {
				k = binary.BigEndian.AppendUint32(statsKey(k[:0], id), spills)
				v = stats[id].encode(v[:0])
				if err := put(k, v); err != nil {
					return err
				}
			}
			return nil
		})
		if err != nil {
			return fmt.Errorf("audit: detect imports: store counters: %w", err)
		}
		spills++
		clear(stats)
		return nil
	}
	for _, t := range []osm.Type{osm.TypeNode, osm.TypeWay, osm.TypeRelation} {
		var prevID int64 = -1
		prevClass := ""
		err := src.ScanVersions(ctx, t, func(o osm.Object) error {
			v, err := versionOf(o)
			if err != nil {
				return err
			}
			switch t {
			case osm.TypeNode:
				fp.n++
			case osm.TypeWay:
				fp.w++
			default:
				fp.r++
			}
			fp.maxCS = max(fp.maxCS, int64(v.cs))
			class := r.Class(v.tags)
			counted := class
			st := stats[v.cs]
			if st == nil {
				if len(stats) >= spill {
					if err := flush(); err != nil {
						return err
					}
				}
				st = &csStats{id: v.cs, uid: v.uid, user: unique.Make(v.user).Value(), first: v.ts, last: v.ts}
				stats[v.cs] = st
			}
			switch {
			case !v.visible:
				st.deletes++
				counted = ""
				if prevID == v.id {
					counted = prevClass
				}
			case v.version == 1:
				st.creates++
			default:
				st.modifies++
			}
			if counted != "" {
				st.addClass(unique.Make(counted).Value(), 1)
			}
			st.first, st.last = min(st.first, v.ts), max(st.last, v.ts)
			if v.node != nil && v.visible {
				st.addPoint(orb.Point{v.node.Lon, v.node.Lat})
			}
			prevID, prevClass = v.id, class
			return nil
		})
		if err != nil {
			return fmt.Errorf("audit: detect imports: scan %s versions: %w", t, err)
		}
	}
	if err := flush(); err != nil {
		return err
	}
	meta, err := json.Marshal(statsMeta{RulesHash: r.Hash(), Fingerprint: fp.String()})
	if err != nil {
		return err
	}
	return d.PutDerived(ctx, func(put func(k, v []byte) error) error { return put(keyStatsMeta, meta) })
}

// version is what counting needs of one object version.
type version struct {
	id, version int64
	cs          osm.ChangesetID
	uid         osm.UserID
	user        string
	visible     bool
	ts          int64
	tags        osm.Tags
	node        *osm.Node
}

func versionOf(o osm.Object) (version, error) {
	switch v := o.(type) {
	case *osm.Node:
		return version{int64(v.ID), int64(v.Version), v.ChangesetID, v.UserID, v.User, v.Visible, v.Timestamp.Unix(), v.Tags, v}, nil
	case *osm.Way:
		return version{int64(v.ID), int64(v.Version), v.ChangesetID, v.UserID, v.User, v.Visible, v.Timestamp.Unix(), v.Tags, nil}, nil
	case *osm.Relation:
		return version{int64(v.ID), int64(v.Version), v.ChangesetID, v.UserID, v.User, v.Visible, v.Timestamp.Unix(), v.Tags, nil}, nil
	}
	return version{}, fmt.Errorf("unexpected object %T", o)
}

// statsKey appends d|I|s| and the changeset id with its sign bit flipped, so
// keys sort by id.
func statsKey(b []byte, id osm.ChangesetID) []byte {
	b = append(b, prefixStats...)
	return binary.BigEndian.AppendUint64(b, uint64(id)^(1<<63))
}

// readStats yields the stored counters per changeset, ascending by id, the
// partials of one changeset added up (account from the earliest spill, which
// saw the changeset's first version).
func readStats(ctx context.Context, d Derived) iter.Seq2[*csStats, error] {
	return func(yield func(*csStats, error) bool) {
		var cur *csStats
		stopped := false
		err := d.ScanDerived(ctx, prefixStats, func(k, v []byte) error {
			if len(k) != len(prefixStats)+12 {
				return fmt.Errorf("%w: import counters key of %d bytes", errCorrupt, len(k))
			}
			id := osm.ChangesetID(binary.BigEndian.Uint64(k[len(prefixStats):]) ^ (1 << 63))
			var st csStats
			if err := st.decode(v); err != nil {
				return fmt.Errorf("changeset %d: %w", id, err)
			}
			st.id = id
			if cur != nil && cur.id == id {
				cur.merge(&st)
				return nil
			}
			if cur != nil && !yield(cur, nil) {
				stopped = true
				return errStopScan
			}
			cur = &st
			return nil
		})
		switch {
		case stopped:
		case err != nil:
			yield(nil, fmt.Errorf("audit: detect imports: read counters: %w", err))
		case cur != nil:
			yield(cur, nil)
		}
	}
}

var (
	errCorrupt  = errors.New("episode: corrupt import counters")
	errStopScan = errors.New("episode: stop")
)

// csStats are the counters Detect keeps per changeset.
type csStats struct {
	id                         osm.ChangesetID
	creates, modifies, deletes int32
	first, last                int64 // unix seconds of the earliest and latest version
	uid                        osm.UserID
	user                       string
	nodes                      orb.Bound
	hasNodes                   bool
	classes                    []classCount // by class
}

type classCount struct {
	class string
	n     int32
}

func (s *csStats) total() int { return int(s.creates + s.modifies + s.deletes) }

func (s *csStats) addClass(c string, n int32) {
	i := sort.Search(len(s.classes), func(i int) bool { return s.classes[i].class >= c })
	if i < len(s.classes) && s.classes[i].class == c {
		s.classes[i].n += n
		return
	}
	s.classes = slices.Insert(s.classes, i, classCount{c, n})
}

func (s *csStats) addPoint(p orb.Point) {
	if !s.hasNodes {
		s.nodes, s.hasNodes = p.Bound(), true
		return
	}
	s.nodes = s.nodes.Extend(p)
}

// merge adds a later partial's counters.
func (s *csStats) merge(o *csStats) {
	s.creates += o.creates
	s.modifies += o.modifies
	s.deletes += o.deletes
	s.first, s.last = min(s.first, o.first), max(s.last, o.last)
	if o.hasNodes {
		if !s.hasNodes {
			s.nodes, s.hasNodes = o.nodes, true
		} else {
			s.nodes = s.nodes.Union(o.nodes)
		}
	}
	for _, c := range o.classes {
		s.addClass(c.class, c.n)
	}
}

// encode appends the counters: creates, modifies, deletes (uvarints), first
// and last (varints), uid (varint), user (length and bytes), a flag byte
// (bit 0: node bound present) and the bound's four float64s, then the class
// count and per class its name and count.
func (s *csStats) encode(b []byte) []byte {
	b = binary.AppendUvarint(b, uint64(s.creates))
	b = binary.AppendUvarint(b, uint64(s.modifies))
	b = binary.AppendUvarint(b, uint64(s.deletes))
	b = binary.AppendVarint(b, s.first)
	b = binary.AppendVarint(b, s.last)
	b = binary.AppendVarint(b, int64(s.uid))
	b = binary.AppendUvarint(b, uint64(len(s.user)))
	b = append(b, s.user...)
	if !s.hasNodes {
		b = append(b, 0)
	} else {
		b = append(b, 1)
		for _, f := range []float64{s.nodes.Min[0], s.nodes.Min[1], s.nodes.Max[0], s.nodes.Max[1]} {
			b = binary.BigEndian.AppendUint64(b, math.Float64bits(f))
		}
	}
	b = binary.AppendUvarint(b, uint64(len(s.classes)))
	for _, c := range s.classes {
		b = binary.AppendUvarint(b, uint64(len(c.class)))
		b = append(b, c.class...)
		b = binary.AppendUvarint(b, uint64(c.n))
	}
	return b
}

// decode reads what encode wrote; it copies the strings.
func (s *csStats) decode(b []byte) error {
	r := bytes.NewReader(b)
	u := func() uint64 { v, _ := binary.ReadUvarint(r); return v }
	i := func() int64 { v, _ := binary.ReadVarint(r); return v }
	str := func() string {
		n := u()
		if n > uint64(r.Len()) {
			return ""
		}
		buf := make([]byte, n)
		r.Read(buf)
		return unique.Make(string(buf)).Value()
	}
	s.creates, s.modifies, s.deletes = int32(u()), int32(u()), int32(u())
	s.first, s.last = i(), i()
	s.uid = osm.UserID(i())
	s.user = str()
	flag, err := r.ReadByte()
	if err != nil {
		return errCorrupt
	}
	if flag&1 != 0 {
		var f [4]float64
		for j := range f {
			var w [8]byte
			if _, err := r.Read(w[:]); err != nil {
				return errCorrupt
			}
			f[j] = math.Float64frombits(binary.BigEndian.Uint64(w[:]))
		}
		s.nodes, s.hasNodes = orb.Bound{Min: orb.Point{f[0], f[1]}, Max: orb.Point{f[2], f[3]}}, true
	}
	n := u()
	if n > uint64(len(b)) {
		return errCorrupt
	}
	for range n {
		c := str()
		s.classes = append(s.classes, classCount{c, int32(u())})
	}
	if r.Len() != 0 {
		return errCorrupt
	}
	return nil
}

// memDerived is a derived area in memory, for a Source without one.
type memDerived struct{ m map[string][]byte }

func newMemDerived() *memDerived { return &memDerived{m: map[string][]byte{}} }

func (d *memDerived) PutDerived(_ context.Context, fill func(put func(k, v []byte) error) error) error {
	return fill(func(k, v []byte) error {
		d.m[string(k)] = bytes.Clone(v)
		return nil
	})
}

func (d *memDerived) ScanDerived(ctx context.Context, prefix []byte, fn func(k, v []byte) error) error {
	var keys []string
	for k := range d.m {
		if bytes.HasPrefix([]byte(k), prefix) {
			keys = append(keys, k)
		}
	}
	slices.Sort(keys)
	for _, k := range keys {
		if err := ctx.Err(); err != nil {
			return err
		}
		if err := fn([]byte(k), d.m[k]); err != nil {
			return err
		}
	}
	return nil
}

func (d *memDerived) GetDerived(_ context.Context, k []byte) ([]byte, bool, error) {
	v, ok := d.m[string(k)]
	return v, ok, nil
}

func (d *memDerived) DropDerived(_ context.Context, prefix []byte) error {
	for k := range d.m {
		if bytes.HasPrefix([]byte(k), prefix) {
			delete(d.m, k)
		}
	}
	return nil
}

// compile-time check that the in-memory area is one.
var _ Derived = (*memDerived)(nil)

// unixUTC turns unix seconds into a UTC time.
func unixUTC(s int64) time.Time { return time.Unix(s, 0).UTC() }
