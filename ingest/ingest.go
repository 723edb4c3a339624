package ingest

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"slices"
	"time"

	"github.com/dgraph-io/badger/v4"
	"github.com/loadwake/loadwake/ingest/internal/codec"
	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// Defaults of IngestOptions.
const (
	DefaultBatchEntries        = 8192
	DefaultBatchBytes          = 2 << 20
	DefaultMaxConflictExamples = 10
)

// IngestOptions tune Ingest. The zero value is ready to use.
type IngestOptions struct {
	// Open returns an osmfile.Reader for one path; nil means osmfile.OpenFile with osmfile.ReadOptions.
	Open func(ctx context.Context, path string) (osmfile.Reader, error)
	// osmfile.ReadOptions are passed to osmfile.OpenFile when Open is nil.
	ReadOptions osmfile.ReadOptions
	// BatchEntries and BatchBytes bound one write transaction (and with it the
	// memory an ingest holds): a batch is committed when either is reached.
	BatchEntries int
	BatchBytes   int
	// MaxConflictExamples is how many conflicts the Report describes.
	MaxConflictExamples int
	// Progress hears about each file; nil means silent.
	Progress Progress
	// Path chooses the write path (see WritePath); the zero value WriteAuto
	// takes the bulk path for an empty on-disk store.
	Path WritePath
	// SortBufferBytes bounds the records the bulk path sorts in memory
	// before it writes them to a temporary file; 0 means
	// DefaultSortBufferBytes.
	SortBufferBytes int
	// TempDir is where the bulk path keeps those files; "" means a folder
	// inside the store's folder, or the system's temporary folder for an
	// in-memory store.
	TempDir string
}

func (o IngestOptions) withDefaults() IngestOptions {
	if o.Open == nil {
		ro := o.ReadOptions
		o.Open = func(ctx context.Context, path string) (osmfile.Reader, error) { return osmfile.OpenFile(ctx, path, ro) }
	}
	if o.BatchEntries <= 0 {
		o.BatchEntries = DefaultBatchEntries
	}
	if o.BatchBytes <= 0 {
		o.BatchBytes = DefaultBatchBytes
	}
	if o.SortBufferBytes <= 0 {
		o.SortBufferBytes = DefaultSortBufferBytes
	}
	if o.MaxConflictExamples == 0 {
		o.MaxConflictExamples = DefaultMaxConflictExamples
	}
	if o.Progress == nil {
		o.Progress = NopProgress{}
	}
	return o
}

// Conflict describes a version or changeset that was already stored with
// different content. The stored one is kept.
type Conflict struct {
	File   string
	Pos    osmfile.Position
	Object string // "way/42 v3" or "changeset/17"
}

func (c Conflict) String() string {
	return fmt.Sprintf("%s: %s: %s already stored with different content; kept the stored one", c.File, c.Pos, c.Object)
}

// FileReport is the outcome for one file of an Ingest call.
type FileReport struct {
	FileRecord
	Skipped bool          // already ingested completely (same SHA-256); nothing read
	Elapsed time.Duration // time spent on the file
	Err     error         // why the file was abandoned; nil when it completed
}

// Report is the outcome of an Ingest call.
type Report struct {
	Files     []FileReport
	Conflicts []Conflict // the first IngestOptions.MaxConflictExamples conflicts
	Totals    Stats      // the store's totals afterwards
	Bulk      bool       // written on the bulk path
}

// Sum adds up the per-file counts.
func (r Report) Sum() FileRecord {
	var s FileRecord
	for _, f := range r.Files {
		s.Size += f.Size
		s.Items += f.Items
		s.Versions += f.Versions
		s.Duplicates += f.Duplicates
		s.Conflicts += f.Conflicts
		s.Changesets += f.Changesets
		s.Updated += f.Updated
	}
	return s
}

// Ingest reads the files at paths, in the order given, into s. Each version is
// stored under its (type, id, version) key: a version already stored with the
// same bytes adds nothing, one stored with different bytes is a conflict (the
// stored one is kept, counted and reported). So files may come in any order, a
// history file and later OsmChange diffs merge into one history, and a rerun
// adds nothing. A file whose SHA-256 is recorded as completely ingested is
// skipped.
//
// An empty on-disk store is filled on the bulk path: all files are read into
// sorted runs first, then written in key order through Badger's
// StreamWriter (the package documentation has the details; opts.Path
// chooses). Otherwise writes go out in batches; each batch commits atomically
// with the store's totals, and a file's record is written only with its last
// batch. A file the reader cannot parse is abandoned at the error (its
// FileReport.Err, a *osmfile.ParseError naming file and position) and the other files
// are still read; the returned error joins those of all abandoned files. A
// cancelled ctx stops between batches (on the bulk path, before anything is
// written, or leaving an interrupted store that the next Ingest starts over)
// and returns ctx's error. In every case the store stays consistent, and a
// rerun after a fix completes without duplicates. Other goroutines must not
// read the store during a bulk ingest, which empties it before it writes.
func Ingest(ctx context.Context, s *Store, paths []string, opts IngestOptions) (Report, error) {
	opts = opts.withDefaults()
	s.writeMu.Lock()
	defer s.writeMu.Unlock()
	bulk, err := s.useBulk(opts.Path)
	if err != nil {
		return Report{}, err
	}
	if bulk {
		return ingestBulk(ctx, s, paths, opts)
	}

	w, err := newWriter(s, opts)
	if err != nil {
		return Report{}, err
	}
	defer w.discard()

	var rep Report
	var fileErrs []error
	for _, path := range paths {
		if err := ctx.Err(); err != nil {
			return w.finish(rep), err
		}
		fr, err := w.file(ctx, path)
		rep.Files = append(rep.Files, fr)
		if err != nil {
			var pe *osmfile.ParseError
			if errors.As(err, &pe) {
				fileErrs = append(fileErrs, err)
				continue
			}
			return w.finish(rep), err
		}
	}
	return w.finish(rep), errors.Join(fileErrs...)
}

// writer holds the state of one Ingest call.
type writer struct {
	s    *Store
	opts IngestOptions

	txn        *badger.Txn
	entries    int
	size       int // estimated bytes of the open transaction
	maxEntries int // hard limits of a transaction, from Badger's
	maxBytes   int
	arena      []byte // keys and values of the open transaction

	totals Stats
	// maxKey[i] is the largest version key of type i (node, way, relation)
	// stored or pending; a larger key is proven absent without a lookup.
	maxKey       [3][]byte
	maxChangeset []byte
	users        map[osm.UserID]struct{} // uids known to be recorded

	// Versions written in the open transaction: the keys proven absent by
	// maxKey, per type and ascending, and the objects of the others.
	pendSorted [3][][]byte
	pendObj    map[[codec.ObjectPrefixLen]byte]struct{}
	view       *badger.Txn // read view of committed data for hasObject
	viewIt     *badger.Iterator

	conflicts []Conflict
	cur       *FileRecord // counts of the file being read
	committed FileRecord  // cur as of the last commit
}

func typeIndex(tb byte) int {
	switch tb {
	case codec.TypeNode:
		return 0
	case codec.TypeWay:
		return 1
	}
	return 2
}

func newWriter(s *Store, opts IngestOptions) (*writer, error) {
	w := &writer{s: s, opts: opts,
		maxEntries: int(min(int64(opts.BatchEntries)*2, s.db.MaxBatchCount()/2)),
		maxBytes:   int(min(int64(opts.BatchBytes)*2, s.db.MaxBatchSize()/2)),
	}
	return w, w.load()
}

// load reads the totals and key bounds from the store and opens a write
// transaction, forgetting everything not committed.
func (w *writer) load() error {
	w.discard()
	w.users = make(map[osm.UserID]struct{})
	w.pendObj = make(map[[codec.ObjectPrefixLen]byte]struct{})
	w.forgetPending()
	err := w.s.db.View(func(txn *badger.Txn) error {
		var err error
		if w.totals, err = readTotals(txn); err != nil {
			return err
		}
		for i, tb := range []byte{codec.TypeNode, codec.TypeWay, codec.TypeRelation} {
			w.maxKey[i] = lastKey(txn, []byte{codec.PrefixVersion, tb})
		}
		w.maxChangeset = lastKey(txn, []byte{codec.PrefixChangeset})
		return nil
	})
	if err != nil {
		return fmt.Errorf("%s: %w", w.s.name(), err)
	}
	w.txn = w.s.db.NewTransaction(true)
	return nil
}

// lastKey returns a copy of the largest key with the given prefix, or nil.
func lastKey(txn *badger.Txn, prefix []byte) []byte {
	opt := badger.IteratorOptions{Reverse: true, Prefix: prefix}
	it := txn.NewIterator(opt)
	defer it.Close()
	// In reverse, Seek finds the largest key <= its argument.
	it.Seek(append(bytes.Clone(prefix), 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff))
	if !it.Valid() {
		return nil
	}
	return it.Item().KeyCopy(nil)
}

func (w *writer) discard() {
	w.closeView()
	if w.txn != nil {
		w.txn.Discard()
		w.txn = nil
	}
}

func (w *writer) finish(rep Report) Report {
	rep.Conflicts = w.conflicts
	rep.Totals = w.totals
	return rep
}

// alloc returns n bytes from the arena; earlier allocations stay valid.
func (w *writer) alloc(n int) []byte {
	if cap(w.arena)-len(w.arena) < n {
		w.arena = make([]byte, 0, max(n, 1<<20))
	}
	b := w.arena[len(w.arena) : len(w.arena)+n : len(w.arena)+n]
	w.arena = w.arena[:len(w.arena)+n]
	return b
}

// entryOverhead is a generous estimate of Badger's per-entry bookkeeping in a
// transaction (timestamp, meta bytes, varint headers).
const entryOverhead = 32

// set adds one entry to the open transaction, committing first when the
// transaction would pass half of Badger's limits, which leaves room for the
// totals and file record that commit adds.
func (w *writer) set(key, val []byte) error {
	if w.entries+1 >= w.maxEntries || w.size+len(key)+len(val)+entryOverhead >= w.maxBytes {
		if err := w.commit(nil); err != nil {
			return err
		}
	}
	if err := w.txn.Set(key, val); err != nil {
		return fmt.Errorf("%s: write: %w", w.s.name(), err)
	}
	w.entries++
	w.size += len(key) + len(val) + entryOverhead
	return nil
}

// commit writes the totals (and the file record, when given) into the open
// transaction, commits it and opens the next one.
func (w *writer) commit(file *FileRecord) error {
	tot, err := json.Marshal(w.totals)
	if err != nil {
		return err
	}
	if err := w.txn.Set(codec.MetaKey(metaTotals), tot); err != nil {
		return fmt.Errorf("%s: write totals: %w", w.s.name(), err)
	}
	if file != nil {
		rec, err := json.Marshal(file)
		if err != nil {
			return err
		}
		if err := w.txn.Set(codec.MetaKey(metaFilePrefix+file.SHA256), rec); err != nil {
			return fmt.Errorf("%s: write file record: %w", w.s.name(), err)
		}
	}
	if err := w.txn.Commit(); err != nil {
		return fmt.Errorf("%s: commit: %w", w.s.name(), err)
	}
	w.closeView()
	w.txn = w.s.db.NewTransaction(true)
	w.forgetPending()
	if w.cur != nil {
		w.committed = *w.cur
	}
	return nil
}

// get returns a copy of the stored or pending value under key.
func (w *writer) get(key []byte) ([]byte, bool, error) {
	item, err := w.txn.Get(key)
	if errors.Is(err, badger.ErrKeyNotFound) {
		return nil, false, nil
	}
	if err != nil {
		return nil, false, fmt.Errorf("%s: read: %w", w.s.name(), err)
	}
	v, err := item.ValueCopy(nil)
	return v, true, err
}

// hasObject reports whether a version of the object with the given key
// prefix (v|type|id) is stored or pending. It avoids iterating the write
// transaction, which would sort its pending writes on every call.
func (w *writer) hasObject(ti int, prefix []byte) bool {
	if _, ok := w.pendObj[[codec.ObjectPrefixLen]byte(prefix)]; ok {
		return true
	}
	keys := w.pendSorted[ti]
	i, _ := slices.BinarySearchFunc(keys, prefix, bytes.Compare)
	if i < len(keys) && bytes.HasPrefix(keys[i], prefix) {
		return true
	}
	if w.viewIt == nil {
		w.view = w.s.db.NewTransaction(false)
		w.viewIt = w.view.NewIterator(badger.IteratorOptions{})
	}
	w.viewIt.Seek(prefix)
	return w.viewIt.Valid() && bytes.HasPrefix(w.viewIt.Item().Key(), prefix)
}

// closeView ends the read view of hasObject, which must not outlive a commit.
func (w *writer) closeView() {
	if w.viewIt != nil {
		w.viewIt.Close()
		w.view.Discard()
		w.viewIt, w.view = nil, nil
	}
}

// forgetPending resets the bookkeeping of the open transaction.
func (w *writer) forgetPending() {
	w.entries, w.size, w.arena = 0, 0, nil
	for i := range w.pendSorted {
		w.pendSorted[i] = w.pendSorted[i][:0]
	}
	clear(w.pendObj)
}

// hashFile returns the size and hex SHA-256 of the file at path.
func hashFile(path string) (int64, string, error) {
	f, err := os.Open(path)
	if err != nil {
		return 0, "", fmt.Errorf("ingest: %w", err)
	}
	defer f.Close()
	h := sha256.New()
	n, err := io.Copy(h, f)
	if err != nil {
		return 0, "", fmt.Errorf("ingest: read %s: %w", path, err)
	}
	return n, hex.EncodeToString(h.Sum(nil)), nil
}

// file ingests one file.
func (w *writer) file(ctx context.Context, path string) (FileReport, error) {
	start := time.Now()
	fr := FileReport{FileRecord: FileRecord{Path: path}}
	size, sum, err := hashFile(path)
	if err != nil {
		fr.Err = err
		return fr, err
	}
	fr.Size, fr.SHA256 = size, sum
	if _, done, err := w.get(codec.MetaKey(metaFilePrefix + sum)); err != nil {
		return fr, err
	} else if done {
		fr.Skipped = true
		return fr, nil
	}

	r, err := w.opts.Open(ctx, path)
	if err != nil {
		fr.Err = err
		return fr, err
	}
	defer r.Close()
	fr.Format = r.Format().String()
	w.opts.Progress.Start(path, size)
	defer w.opts.Progress.Finish()

	w.committed = fr.FileRecord
	w.cur = &fr.FileRecord
	err = w.read(ctx, r, &fr.FileRecord)
	if err == nil {
		err = ctx.Err()
	}
	if err != nil {
		// Drop the uncommitted batch; the committed ones are consistent.
		fr.FileRecord = w.committed
		if lerr := w.load(); lerr != nil {
			return fr, lerr
		}
		if !errors.As(err, new(*osmfile.ParseError)) && !errors.Is(err, context.Canceled) && !errors.Is(err, context.DeadlineExceeded) {
			err = fmt.Errorf("ingest %s: %w", path, err)
		}
		fr.Err = err
		fr.Elapsed = time.Since(start)
		return fr, err
	}
	fr.Completed = time.Now().UTC()
	if err := w.commit(&fr.FileRecord); err != nil {
		fr.Err = err
		return fr, err
	}
	w.opts.Progress.Update(r.BytesRead(), fr.Items)
	fr.Elapsed = time.Since(start)
	return fr, nil
}

// read stores the items of r, committing full batches.
func (w *writer) read(ctx context.Context, r osmfile.Reader, fr *FileRecord) error {
	for r.Scan() {
		it := r.Item()
		fr.Items++
		var err error
		switch {
		case it.Object != nil:
			err = w.version(it, fr)
		case it.Changeset != nil:
			err = w.changeset(it, fr)
		}
		if err != nil {
			return err
		}
		if w.entries >= w.opts.BatchEntries || w.size >= w.opts.BatchBytes {
			// (set commits earlier when the store's own limits are lower)
			if err := ctx.Err(); err != nil {
				return err
			}
			if err := w.commit(nil); err != nil {
				return err
			}
			w.opts.Progress.Update(r.BytesRead(), fr.Items)
		}
	}
	return r.Err()
}

// version stores one object version.
func (w *writer) version(it osmfile.Item, fr *FileRecord) error {
	var (
		tb      byte
		id      int64
		ver     int
		visible bool
		ts      time.Time
		uid     osm.UserID
		user    string
	)
	switch o := it.Object.(type) {
	case *osm.Node:
		tb, id, ver, visible, ts, uid, user = codec.TypeNode, int64(o.ID), o.Version, o.Visible, o.Timestamp, o.UserID, o.User
	case *osm.Way:
		tb, id, ver, visible, ts, uid, user = codec.TypeWay, int64(o.ID), o.Version, o.Visible, o.Timestamp, o.UserID, o.User
	case *osm.Relation:
		tb, id, ver, visible, ts, uid, user = codec.TypeRelation, int64(o.ID), o.Version, o.Visible, o.Timestamp, o.UserID, o.User
	default:
		return fmt.Errorf("ingest: %s: %s: unexpected object %T", fr.Path, it.Pos, it.Object)
	}
	key := codec.AppendVersionKey(w.alloc(codec.VersionKeyLen)[:0], tb, id, ver)
	mark := len(w.arena)
	buf, err := codec.AppendVersionValue(w.arena, it.Object)
	if err != nil {
		return fmt.Errorf("%s: %s: %w", fr.Path, it.Pos, err)
	}
	val := buf[mark:len(buf):len(buf)]
	if cap(buf) == cap(w.arena) {
		w.arena = buf
	} else {
		w.arena = nil // the value moved to an array of its own
	}

	ti := typeIndex(tb)
	newObject, fast := false, false
	if maxk := w.maxKey[ti]; maxk == nil || bytes.Compare(key, maxk) > 0 {
		// Larger than every key of the type: absent, and a new object
		// unless the largest key belongs to the same id.
		newObject = maxk == nil || !bytes.Equal(key[:codec.ObjectPrefixLen], maxk[:codec.ObjectPrefixLen])
		w.maxKey[ti] = key
		fast = true
	} else {
		old, found, err := w.get(key)
		if err != nil {
			return err
		}
		if found {
			if bytes.Equal(old, val) {
				fr.Duplicates++
			} else {
				w.conflict(fr, it.Pos, fmt.Sprintf("%s/%d v%d", codec.TypeOfByte(tb), id, ver))
			}
			return nil
		}
		newObject = !w.hasObject(ti, key[:codec.ObjectPrefixLen])
	}
	if err := w.set(key, val); err != nil {
		return err
	}
	// recorded after set, which may have committed and reset the bookkeeping
	if fast {
		w.pendSorted[ti] = append(w.pendSorted[ti], key)
	} else {
		w.pendObj[[codec.ObjectPrefixLen]byte(key)] = struct{}{}
	}
	fr.Versions++
	var p orb.Point
	if n, ok := it.Object.(*osm.Node); ok {
		p = orb.Point{n.Lon, n.Lat}
	}
	w.totals.addVersion(tb, newObject, visible, p, ts)
	return w.user(uid, user)
}

// addVersion counts one newly stored version of type tb in the totals: p is
// a node's position (used when visible), ts its time (zero for none).
func (t *Stats) addVersion(tb byte, newObject, visible bool, p orb.Point, ts time.Time) {
	switch tb {
	case codec.TypeNode:
		t.NodeVersions++
		if newObject {
			t.Nodes++
		}
		if visible {
			if t.HasBBox {
				t.BBox = t.BBox.Extend(p)
			} else {
				t.BBox, t.HasBBox = orb.Bound{Min: p, Max: p}, true
			}
		}
	case codec.TypeWay:
		t.WayVersions++
		if newObject {
			t.Ways++
		}
	default:
		t.RelationVersions++
		if newObject {
			t.Relations++
		}
	}
	if !visible {
		t.DeletedVersions++
	}
	if !ts.IsZero() {
		ts = ts.UTC()
		if t.FirstEdit.IsZero() || ts.Before(t.FirstEdit) {
			t.FirstEdit = ts
		}
		if ts.After(t.LastEdit) {
			t.LastEdit = ts
		}
	}
}

// user records a uid the first time it is seen.
func (w *writer) user(uid osm.UserID, name string) error {
	if uid == 0 {
		return nil
	}
	if _, ok := w.users[uid]; ok {
		return nil
	}
	key := make([]byte, 1+len(metaUserPrefix)+8)
	copy(key, codec.MetaKey(metaUserPrefix))
	codec.PutID(key[1+len(metaUserPrefix):], int64(uid))
	_, found, err := w.get(key)
	if err != nil {
		return err
	}
	if !found {
		if err := w.set(key, []byte(name)); err != nil {
			return err
		}
		w.totals.Users++
	}
	w.users[uid] = struct{}{}
	return nil
}

// changeset stores one changeset record. A stored open record is replaced
// by a closed one (a later dump completes it); other differences are
// conflicts.
func (w *writer) changeset(it osmfile.Item, fr *FileRecord) error {
	c := it.Changeset
	key := codec.ChangesetKey(int64(c.ID))
	val := codec.AppendChangesetValue(nil, c)
	if w.maxChangeset == nil || bytes.Compare(key, w.maxChangeset) > 0 {
		w.maxChangeset = key
	} else {
		old, found, err := w.get(key)
		if err != nil {
			return err
		}
		if found {
			switch {
			case bytes.Equal(old, val):
				fr.Duplicates++
			case len(old) > 1 && old[1]&codec.FlagOpen != 0 && !c.Open:
				if err := w.set(key, val); err != nil {
					return err
				}
				fr.Updated++
			default:
				w.conflict(fr, it.Pos, fmt.Sprintf("changeset/%d", c.ID))
			}
			return nil
		}
	}
	if err := w.set(key, val); err != nil {
		return err
	}
	fr.Changesets++
	w.totals.Changesets++
	return w.user(c.UserID, c.User)
}

func (w *writer) conflict(fr *FileRecord, pos osmfile.Position, object string) {
	fr.Conflicts++
	if len(w.conflicts) < w.opts.MaxConflictExamples {
		w.conflicts = append(w.conflicts, Conflict{File: fr.Path, Pos: pos, Object: object})
	}
}
