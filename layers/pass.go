package layers

import (
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"runtime"
	"sync"
	"sync/atomic"
	"time"

	"github.com/paulmach/osm"
)

// Source is the history store as the classification pass sees it;
// *ingest.Store meets it. Its methods are called from several goroutines at
// once: reads from inside ScanVersions' and ScanDerived's callbacks and from
// other goroutines while a scan goes on, PutDerived from another goroutine
// while reads go on.
type Source interface {
	// ScanVersions calls fn for every version of type t, id ascending, then
	// version ascending. fn may keep o.
	ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error
	// ObjectVersions returns every version of one object, oldest first.
	ObjectVersions(ctx context.Context, t osm.Type, id int64) ([]osm.Object, error)
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
	// BatchSize is how many events (and first-edit records) are written per batch;
	// 0 means 4096. Memory use of the pass is bounded by it.
	BatchSize int
	// Workers is how many goroutines classify, each taking runs of whole
	// objects (id ranges) from the scan; 0 means runtime.GOMAXPROCS(0), 1
	// classifies in the scanning goroutine. The stored results do not depend
	// on it.
	Workers int
	// TempDir is where the pass writes its temporary tables: node positions
	// (24 bytes per node version) and, once a classless vertex moves, the
	// node→way table (16 bytes per distinct node and way pair, sorted in
	// runs of 16 MiB). "" means os.TempDir(). Each file's name is removed as
	// soon as the file is complete.
	TempDir string
	// Progress, when set, is called after each batch of events with the object
	// type being scanned and the versions of that type scanned so far. Calls
	// come from several goroutines, one at a time.
	Progress func(t osm.Type, versions int64)

	chunk      int // versions per run handed to a worker; 0 means defaultChunk
	nodeWayRun int // pairs per sorted run of the node→way table; 0 means defaultNodeWayRun
}

// defaultChunk is how many versions (rounded up to whole objects) a worker
// takes at a time: large enough that handing over costs nothing, small
// enough that the queued runs stay small.
const defaultChunk = 512

// releaseEvery is how many runs the scan hands out between drops of the
// tables' pages from the resident set: some 130,000 versions, a few
// milliseconds of page faults to map the hot pages again.
const releaseEvery = 256

// tablesResident is how large the node position and node→way tables may be
// together before the scan drops their pages every releaseEvery runs: tables
// up to this size may stay resident whole. Dropping the pages of larger
// tables keeps the resident set flat, at the price of page faults: at 10.3M
// versions (a 171 MB and a 74 MB table) dropping them every 256 runs took
// 45% of the pass's CPU in binary searches faulting the pages in again.
const tablesResident = 256 << 20

func (o Options) workers() int {
	if o.Workers > 0 {
		return o.Workers
	}
	return runtime.GOMAXPROCS(0)
}

func (o Options) chunkSize() int {
	if o.chunk > 0 {
		return o.chunk
	}
	return defaultChunk
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
//
// One goroutine scans each type in key order and hands runs of whole objects
// to opts.Workers classifying goroutines; another writes the events. The node
// scan also writes the node position table that places ways and relations.
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
		sum:   newSummary(r.Hash()),
	}
	defer func() { p.nodes.close() }() // after a failure; closing twice is harmless
	index := &nodeWayIndex{dir: opts.TempDir, runLen: opts.nodeWayRun}
	p.index = index
	if index.runLen <= 0 {
		index.runLen = defaultNodeWayRun
	}
	defer index.close()
	p.workers = make([]*worker, opts.workers())
	for i := range p.workers {
		p.workers[i] = &worker{
			p:   p,
			sum: newSummary(""),
			loc: &storeLocator{src: src, index: index},
		}
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
	if err := p.nodes.close(); err != nil {
		return Summary{}, fmt.Errorf("classify: %w", err)
	}
	if err := p.writeFirstEdits(); err != nil {
		return Summary{}, err
	}
	for _, w := range p.workers {
		p.sum.add(w.sum)
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

func newSummary(rulesHash string) Summary {
	return Summary{
		RulesHash: rulesHash,
		Versions:  make(map[string]int64),
		Events:    make(map[string]int64),
		Families:  make(map[string]int64),
	}
}

// add adds the event counts of a worker's partial summary to s.
func (s *Summary) add(w Summary) {
	for k, n := range w.Events {
		s.Events[k] += n
	}
	for k, n := range w.Families {
		s.Families[k] += n
	}
	s.Unlocated += w.Unlocated
	s.WaysMissingNodes += w.WaysMissingNodes
	s.ProvenanceOnly += w.ProvenanceOnly
}

// pass is the state of one Run.
type pass struct {
	ctx     context.Context
	src     Source
	rules   Rules
	opts    Options
	workers []*worker
	nodes   *nodePositions // written by the node scan
	index   *nodeWayIndex  // built on the first vertex move
	fp      fingerprint
	first   map[osm.UserID]int64 // earliest version per account, unix seconds
	sum     Summary

	scanned  atomic.Int64 // versions of the current type handed to workers
	progress sync.Mutex   // serialises opts.Progress

	// The writer goroutine writes full batches while the scan goes on; at
	// most workers+2 batches exist at once (one filling per worker, one
	// queued, one being written) plus the free ones.
	queue chan []Event
	free  chan []Event
	done  chan error
	werr  atomic.Pointer[error] // first write error, seen by flush
	kbuf  []byte                // writer's key and value buffers
	vbuf  []byte
}

// worker classifies runs of versions; each has its own locator and partial
// summary, added up when the pass ends.
type worker struct {
	p   *pass
	loc *storeLocator
	sum Summary // event counts only
	buf []Event // batch being filled
}

// scan reads every version of type t, keeps the fingerprint, first edits and
// (for nodes) the node position table, and hands runs of whole objects to the
// workers. The runs cover id ranges in order, and a version is compared only
// with the versions of its own object, so the events do not depend on how the
// runs are shared out.
func (p *pass) scan(t osm.Type) error {
	ctx, cancel := context.WithCancelCause(p.ctx)
	defer cancel(nil)
	var table *nodeFileWriter
	if t == osm.TypeNode {
		var err error
		if table, err = newNodeFileWriter(p.opts.TempDir); err != nil {
			return fmt.Errorf("classify: %w", err)
		}
	}
	for _, w := range p.workers {
		w.loc.ctx = ctx
		w.loc.nodes = p.nodes
	}
	p.scanned.Store(0)

	// With one worker the scanning goroutine classifies; otherwise runs go
	// through a channel to the worker goroutines.
	var work chan []osm.Object
	var wg sync.WaitGroup
	dispatch := func(run []osm.Object) error { return p.workers[0].classify(ctx, t, run) }
	if len(p.workers) > 1 {
		work = make(chan []osm.Object, len(p.workers))
		for _, w := range p.workers {
			wg.Go(func() {
				failed := false
				for run := range work {
					if failed {
						continue // keep draining so the scan never blocks
					}
					if err := w.classify(ctx, t, run); err != nil {
						cancel(err)
						failed = true
					}
				}
				if !failed {
					if err := w.flush(ctx, t); err != nil {
						cancel(err)
					}
				}
			})
		}
		dispatch = func(run []osm.Object) error {
			select {
			case work <- run:
				return nil
			case <-ctx.Done():
				return context.Cause(ctx)
			}
		}
	}

	size := p.opts.chunkSize()
	run := make([]osm.Object, 0, size)
	var n, lastID int64
	runs := 0
	err := p.src.ScanVersions(ctx, t, func(o osm.Object) error {
		p.fp.add(o)
		n++
		if table != nil {
			if err := table.add(o.(*osm.Node)); err != nil {
				return err
			}
		}
		uid, ts := editor(o)
		if s, ok := p.first[uid]; !ok || ts.Unix() < s {
			p.first[uid] = ts.Unix()
		}
		id := o.ObjectID().Ref()
		if len(run) >= size && id != lastID {
			p.scanned.Store(n - 1)
			if err := dispatch(run); err != nil {
				return err
			}
			if runs++; runs%releaseEvery == 0 && p.nodes.size()+p.index.size() > tablesResident {
				p.nodes.release()
				p.index.release()
			}
			run = make([]osm.Object, 0, size)
		}
		run = append(run, o)
		lastID = id
		return nil
	})
	if err == nil && len(run) > 0 {
		p.scanned.Store(n)
		err = dispatch(run)
	}
	if work != nil {
		close(work)
		wg.Wait()
	} else if err == nil {
		err = p.workers[0].flush(ctx, t)
	}
	if cause := context.Cause(ctx); cause != nil && (err == nil || errors.Is(err, context.Canceled)) {
		err = cause
	}
	if table != nil {
		if err == nil {
			p.nodes, err = table.finish()
		} else {
			table.abort()
		}
	}
	p.sum.Versions[string(t)] = n
	if err != nil {
		return fmt.Errorf("classify: %s versions: %w", t, err)
	}
	return nil
}

// classify classifies one run of versions: whole objects, id ascending, each
// object's versions in order.
func (w *worker) classify(ctx context.Context, t osm.Type, run []osm.Object) error {
	var prev osm.Object
	for _, o := range run {
		if prev != nil && prev.ObjectID().Ref() != o.ObjectID().Ref() {
			prev = nil
		}
		misses := w.loc.misses
		evs := Classify(prev, o, w.p.rules, w.loc)
		if w.loc.err != nil {
			return w.loc.err
		}
		if t == osm.TypeWay && w.loc.misses > misses {
			w.sum.WaysMissingNodes++
		}
		w.buf = append(w.buf, evs...)
		prev = o
		if len(w.buf) >= w.p.opts.batch() {
			if err := w.flush(ctx, t); err != nil {
				return err
			}
		}
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

// flush hands the buffered events to the writer, counts them into the
// worker's summary and reports progress. It returns the writer's first error,
// if any.
func (w *worker) flush(ctx context.Context, t osm.Type) error {
	p := w.p
	if err := ctx.Err(); err != nil {
		return context.Cause(ctx)
	}
	if e := p.werr.Load(); e != nil {
		return *e
	}
	if len(w.buf) == 0 {
		return nil
	}
	for i := range w.buf {
		e := &w.buf[i]
		w.sum.Events[e.Layer.String()]++
		if !e.Located {
			w.sum.Unlocated++
		}
		if e.Layer == Bookkeeping {
			w.sum.ProvenanceOnly++
		}
		if e.Layer == Attribute || e.Layer == Bookkeeping {
			for _, k := range e.Keys {
				w.sum.Families[k.Family]++
			}
		}
	}
	p.queue <- w.buf
	select {
	case b := <-p.free:
		w.buf = b
	default:
		w.buf = nil
	}
	if p.opts.Progress != nil {
		p.progress.Lock()
		p.opts.Progress(t, p.scanned.Load())
		p.progress.Unlock()
	}
	return nil
}

// sortedWriter is a Source that takes derived records in any key order and
// writes them sorted in bulk (*ingest.Store's PutDerivedSorted): the events
// of a pass come in scan order, not in key order, and a store writing them
// in key order needs neither a write-ahead log nor compactions.
type sortedWriter interface {
	PutDerivedSorted(ctx context.Context, tempDir string, fill func(put func(key, value []byte) error) error) error
}

func (p *pass) startWriter() {
	p.queue = make(chan []Event, 1)
	p.free = make(chan []Event, len(p.workers)+2)
	p.done = make(chan error, 1)
	queue := p.queue
	// drain takes every batch from the queue, hands it to write until write
	// fails, and returns the batch to the free list.
	drain := func(write func([]Event) error) error {
		var err error
		for b := range queue {
			if err == nil {
				if err = write(b); err != nil {
					p.werr.Store(&err)
				}
			}
			clear(b)
			select {
			case p.free <- b[:0]:
			default:
			}
		}
		return err
	}
	sw, ok := p.src.(sortedWriter)
	if !ok {
		go func() { p.done <- drain(p.write) }()
		return
	}
	go func() {
		err := sw.PutDerivedSorted(p.ctx, p.opts.TempDir, func(put func(k, v []byte) error) error {
			return drain(func(evs []Event) error { return p.putEvents(evs, put) })
		})
		if err != nil {
			err = fmt.Errorf("write events: %w", err)
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
	err := p.src.PutDerived(p.ctx, func(put func(k, v []byte) error) error { return p.putEvents(evs, put) })
	if err != nil {
		return fmt.Errorf("write events: %w", err)
	}
	return nil
}

// putEvents puts each event under its time key and its changeset key.
func (p *pass) putEvents(evs []Event, put func(k, v []byte) error) error {
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

// ownPrefixes are the derived keys a pass writes, and the node→way index that
// earlier versions of the pass kept in the store; the summary comes first so
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
