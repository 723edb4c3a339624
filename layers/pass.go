package layers

import (
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"sync/atomic"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// Source is the history store as the classification pass sees it;
// *ingest.Store meets it. Reads may be made from inside ScanVersions' and
// ScanDerived's callbacks, and PutDerived may be called from inside
// ScanVersions' callback and from another goroutine while reads go on.
type Source interface {
	// ScanVersions calls fn for every version of type t, id ascending, then
	// version ascending. fn may keep o.
	ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error
	// ObjectVersions returns every version of one object, oldest first.
	ObjectVersions(ctx context.Context, t osm.Type, id int64) ([]osm.Object, error)
	// NodeAt returns the position of a node valid at time at.
	NodeAt(ctx context.Context, id osm.NodeID, at time.Time) (orb.Point, bool, error)
	// PutDerived writes derived records in one batch.
	PutDerived(ctx context.Context, fill func(put func(key, value []byte) error) error) error
	// ScanDerived calls fn for every derived record under prefix in key order;
	// key and value are valid only inside fn.
	ScanDerived(ctx context.Context, prefix []byte, fn func(key, value []byte) error) error
	// GetDerived returns one derived record.
	GetDerived(ctx context.Context, key []byte) ([]byte, bool, error)
	// DropDerived deletes every derived record under prefix.
	DropDerived(ctx context.Context, prefix []byte) error
}

// Options tune Run. The zero value is ready to use.
type Options struct {
	// Force re-classifies even when the rules and the data are unchanged.
	Force bool
	// BatchSize is how many events (and index entries) are written per batch;
	// 0 means 4096. Memory use of the pass is bounded by it.
	BatchSize int
	// NodeTable is how many node versions the pass keeps in memory (about 24
	// bytes each) to place ways and relations without a store lookup per
	// node; 0 means DefaultNodeTable, a negative value none. Nodes beyond it
	// are looked up in the store.
	NodeTable int
	// Progress, when set, is called after each batch of events with the object
	// type being scanned and the versions of that type scanned so far.
	Progress func(t osm.Type, versions int64)
}

func (o Options) batch() int {
	if o.BatchSize > 0 {
		return o.BatchSize
	}
	return 4096
}

// Summary describes one classification pass. It is stored under
// d|meta|classify as JSON and read back by Summarize.
type Summary struct {
	RulesHash   string `json:"rules_hash"`
	Fingerprint string `json:"fingerprint"` // versions per type and highest changeset id
	// Versions scanned per type ("node", "way", "relation").
	Versions map[string]int64 `json:"versions"`
	// Events per layer name, including "bookkeeping".
	Events map[string]int64 `json:"events"`
	// Families counts key touches in attribute and bookkeeping events per key
	// family.
	Families map[string]int64 `json:"families"`
	// Unlocated counts events without a position.
	Unlocated int64 `json:"unlocated"`
	// WaysMissingNodes counts way versions placed while some of their nodes
	// had no known position at that time (absent from the extract or deleted).
	WaysMissingNodes int64 `json:"ways_missing_nodes"`
	// ProvenanceOnly counts versions that touched only provenance keys (the
	// bookkeeping events).
	ProvenanceOnly int64 `json:"provenance_only"`
	// Users counts accounts with at least one version.
	Users int64 `json:"users"`
	// Skipped is true when Run found rules and data unchanged and did nothing;
	// it is not stored.
	Skipped bool `json:"-"`
}

// fingerprint identifies the scanned data cheaply: versions per type and the
// highest changeset id. New data from an ingest changes at least one of them.
type fingerprint struct {
	n, w, r int64
	maxCS   int64
}

func (f *fingerprint) add(o osm.Object) {
	var cs osm.ChangesetID
	switch v := o.(type) {
	case *osm.Node:
		f.n++
		cs = v.ChangesetID
	case *osm.Way:
		f.w++
		cs = v.ChangesetID
	case *osm.Relation:
		f.r++
		cs = v.ChangesetID
	}
	f.maxCS = max(f.maxCS, int64(cs))
}

func (f fingerprint) String() string {
	return fmt.Sprintf("nodes=%d ways=%d relations=%d max_changeset=%d", f.n, f.w, f.r, f.maxCS)
}

// scanTypes is the order of the pass: nodes, then ways, then relations.
var scanTypes = [...]osm.Type{osm.TypeNode, osm.TypeWay, osm.TypeRelation}

// Run classifies every version in src with rules r and writes the events, the
// changeset index, per-user first-edit times and a Summary into src's derived
// area (layout in the package documentation). When the rules hash and the data
// fingerprint match the stored summary, Run does nothing and returns that
// summary with Skipped set, unless opts.Force. Otherwise it first drops what an
// earlier pass wrote, so a rerun leaves no stale events; an interrupted pass
// leaves no summary, and the next Run starts over. ctx is checked per batch.
func Run(ctx context.Context, src Source, r Rules, opts Options) (Summary, error) {
	if !opts.Force {
		old, err := Summarize(ctx, src)
		switch {
		case err == nil && old.RulesHash == r.Hash():
			var fp fingerprint
			for _, t := range scanTypes {
				if err := src.ScanVersions(ctx, t, func(o osm.Object) error { fp.add(o); return nil }); err != nil {
					return Summary{}, fmt.Errorf("classify: fingerprint %s versions: %w", t, err)
				}
			}
			if fp.String() == old.Fingerprint {
				old.Skipped = true
				return old, nil
			}
		case err != nil && !errors.Is(err, ErrNotClassified):
			return Summary{}, err
		}
	}
	if err := dropOwn(ctx, src); err != nil {
		return Summary{}, err
	}
	p := &pass{
		ctx: ctx, src: src, rules: r, opts: opts,
		first: make(map[osm.UserID]int64),
		sum: Summary{
			RulesHash: r.Hash(),
			Versions:  make(map[string]int64),
			Events:    make(map[string]int64),
			Families:  make(map[string]int64),
		},
	}
	p.loc = &storeLocator{ctx: ctx, src: src, pass: p}
	switch {
	case opts.NodeTable == 0:
		p.loc.table = newNodeTable(DefaultNodeTable)
	case opts.NodeTable > 0:
		p.loc.table = newNodeTable(opts.NodeTable)
	}
	p.startWriter()
	for _, t := range scanTypes {
		if err := p.scan(t); err != nil {
			p.stopWriter()
			return Summary{}, err
		}
	}
	if err := p.stopWriter(); err != nil {
		return Summary{}, fmt.Errorf("classify: %w", err)
	}
	if err := p.writeFirstEdits(); err != nil {
		return Summary{}, err
	}
	p.sum.Fingerprint = p.fp.String()
	p.sum.Users = int64(len(p.first))
	meta, err := json.Marshal(p.sum)
	if err != nil {
		return Summary{}, fmt.Errorf("classify: encode summary: %w", err)
	}
	err = src.PutDerived(ctx, func(put func(k, v []byte) error) error { return put(keyMeta, meta) })
	if err != nil {
		return Summary{}, fmt.Errorf("classify: write summary: %w", err)
	}
	return p.sum, nil
}

// pass is the state of one Run.
type pass struct {
	ctx   context.Context
	src   Source
	rules Rules
	opts  Options
	loc   *storeLocator
	fp    fingerprint
	first map[osm.UserID]int64 // earliest version per account, unix seconds
	sum   Summary
	buf   []Event // batch being filled

	// The writer goroutine writes full batches while the scan goes on; at
	// most three batches exist at once (filling, queued, being written).
	queue chan []Event
	free  chan []Event
	done  chan error
	werr  atomic.Pointer[error] // first write error, seen by flush
	kbuf  []byte                // writer's key and value buffers
	vbuf  []byte
}

func (p *pass) scan(t osm.Type) error {
	var prev osm.Object
	var n int64
	err := p.src.ScanVersions(p.ctx, t, func(o osm.Object) error {
		if prev != nil && prev.ObjectID().Ref() != o.ObjectID().Ref() {
			prev = nil
		}
		p.fp.add(o)
		if n++; n%4096 == 0 {
			if err := p.ctx.Err(); err != nil {
				return err
			}
		}
		if nd, ok := o.(*osm.Node); ok && p.loc.table != nil {
			p.loc.table.add(nd)
		}
		uid, ts := editor(o)
		if s, ok := p.first[uid]; !ok || ts.Unix() < s {
			p.first[uid] = ts.Unix()
		}
		misses := p.loc.misses
		evs := Classify(prev, o, p.rules, p.loc)
		if p.loc.err != nil {
			return p.loc.err
		}
		if t == osm.TypeWay && p.loc.misses > misses {
			p.sum.WaysMissingNodes++
		}
		p.buf = append(p.buf, evs...)
		prev = o
		if len(p.buf) >= p.opts.batch() {
			if err := p.flush(); err != nil {
				return err
			}
			if p.opts.Progress != nil {
				p.opts.Progress(t, n)
			}
		}
		return nil
	})
	if err == nil {
		err = p.flush()
	}
	if t == osm.TypeNode && p.loc.table != nil {
		p.loc.table.done()
	}
	p.sum.Versions[string(t)] = n
	if err != nil {
		return fmt.Errorf("classify: %s versions: %w", t, err)
	}
	return nil
}

func editor(o osm.Object) (osm.UserID, time.Time) {
	switch v := o.(type) {
	case *osm.Node:
		return v.UserID, v.Timestamp
	case *osm.Way:
		return v.UserID, v.Timestamp
	case *osm.Relation:
		return v.UserID, v.Timestamp
	}
	return 0, time.Time{}
}

// flush hands the buffered events to the writer and counts them into the
// summary. It returns the writer's first error, if any.
func (p *pass) flush() error {
	if err := p.ctx.Err(); err != nil {
		return err
	}
	if e := p.werr.Load(); e != nil {
		return *e
	}
	if len(p.buf) == 0 {
		return nil
	}
	for i := range p.buf {
		e := &p.buf[i]
		p.sum.Events[e.Layer.String()]++
		if !e.Located {
			p.sum.Unlocated++
		}
		if e.Layer == Bookkeeping {
			p.sum.ProvenanceOnly++
		}
		if e.Layer == Attribute || e.Layer == Bookkeeping {
			for _, k := range e.Keys {
				p.sum.Families[k.Family]++
			}
		}
	}
	p.queue <- p.buf
	p.buf = <-p.free
	return nil
}

func (p *pass) startWriter() {
	p.queue = make(chan []Event, 1)
	p.free = make(chan []Event, 2)
	p.done = make(chan error, 1)
	p.free <- nil
	queue := p.queue
	go func() {
		var err error
		for b := range queue {
			if err == nil {
				if err = p.write(b); err != nil {
					p.werr.Store(&err)
				}
			}
			clear(b)
			p.free <- b[:0]
		}
		p.done <- err
	}()
}

// stopWriter waits for the queued batches to be written and returns the first
// write error.
func (p *pass) stopWriter() error {
	if p.queue == nil {
		return nil
	}
	close(p.queue)
	p.queue = nil
	return <-p.done
}

// write stores one batch of events under their time and changeset keys.
func (p *pass) write(evs []Event) error {
	err := p.src.PutDerived(p.ctx, func(put func(k, v []byte) error) error {
		for i := range evs {
			e := &evs[i]
			p.vbuf = encodeValue(p.vbuf[:0], e)
			p.kbuf = eventKey(p.kbuf[:0], e)
			if err := put(p.kbuf, p.vbuf); err != nil {
				return err
			}
			p.kbuf = changesetKey(p.kbuf[:0], e)
			if err := put(p.kbuf, nil); err != nil {
				return err
			}
		}
		return nil
	})
	if err != nil {
		return fmt.Errorf("write events: %w", err)
	}
	return nil
}

// writeFirstEdits stores d|U|uid → unix seconds of the account's first version.
func (p *pass) writeFirstEdits() error {
	type rec struct {
		uid osm.UserID
		ts  int64
	}
	batch := make([]rec, 0, p.opts.batch())
	write := func() error {
		if err := p.ctx.Err(); err != nil {
			return err
		}
		err := p.src.PutDerived(p.ctx, func(put func(k, v []byte) error) error {
			for _, r := range batch {
				k := binary.BigEndian.AppendUint64(append([]byte(nil), prefixFirstEdit...), uint64(r.uid))
				v := binary.BigEndian.AppendUint64(nil, uint64(r.ts))
				if err := put(k, v); err != nil {
					return err
				}
			}
			return nil
		})
		batch = batch[:0]
		return err
	}
	for uid, ts := range p.first {
		batch = append(batch, rec{uid, ts})
		if len(batch) == cap(batch) {
			if err := write(); err != nil {
				return fmt.Errorf("classify: write first edits: %w", err)
			}
		}
	}
	if err := write(); err != nil {
		return fmt.Errorf("classify: write first edits: %w", err)
	}
	return nil
}

// ownPrefixes are the derived keys a pass writes; the summary comes first so
// that an interrupted drop leaves the store "not classified".
var ownPrefixes = [...][]byte{keyMeta, prefixEvent, prefixChangeset, prefixFirstEdit, prefixNodeWays}

// dropOwn deletes what an earlier pass wrote. A prefix with no key is not
// dropped: the store's drop flushes and compacts, which costs as much as
// classifying when nothing is there.
func dropOwn(ctx context.Context, src Source) error {
	for _, p := range ownPrefixes {
		found := false
		err := src.ScanDerived(ctx, p, func(_, _ []byte) error { found = true; return errStop })
		if err != nil && !errors.Is(err, errStop) {
			return fmt.Errorf("classify: look for %s: %w", p, err)
		}
		if !found {
			continue
		}
		if err := src.DropDerived(ctx, p); err != nil {
			return fmt.Errorf("classify: drop %s: %w", p, err)
		}
	}
	return nil
}
