package ingest

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"time"

	"github.com/dgraph-io/badger/v4"
	"github.com/dgraph-io/badger/v4/pb"
	"github.com/dgraph-io/ristretto/v2/z"
	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// WritePath chooses how Ingest writes into the store.
type WritePath uint8

// The write paths.
const (
	// WriteAuto takes the bulk path for an empty on-disk store (or one
	// holding an interrupted bulk ingest) and transactions otherwise.
	WriteAuto WritePath = iota
	// WriteTransactional always writes in transactions of a batch each.
	WriteTransactional
	// WriteBulk takes the bulk path, on disk or in memory, and refuses a
	// store that holds data already.
	WriteBulk
)

// DefaultSortBufferBytes is the default of IngestOptions.SortBufferBytes.
const DefaultSortBufferBytes = 64 << 20

// bulkMarker is the file a bulk ingest keeps in the store's folder while it
// writes; finding it on open means the ingest was interrupted.
const bulkMarker = "LOADWAKE-BULK-INGEST"

// runDirPrefix names the temporary folders of sorted runs.
const runDirPrefix = "bulk-runs-"

// Stream ids of the bulk write: each covers one key prefix, so their key
// ranges do not overlap as Badger's StreamWriter requires.
const (
	streamChangesets = 1
	streamVersions   = 2
	streamMeta       = 3
)

// recordOverhead bounds the bytes a record takes in a run besides its key and value.
const recordOverhead = 1 + 6*binary.MaxVarintLen64 + binary.MaxVarintLen32

// bulkFlushBytes is how many encoded entries go to the StreamWriter at once.
const bulkFlushBytes = 4 << 20

// useBulk decides the write path of an Ingest call.
func (s *Store) useBulk(path WritePath) (bool, error) {
	if s.interrupted.Load() {
		// only the bulk path can finish what an interrupted one began
		return true, nil
	}
	if path == WriteTransactional || (path == WriteAuto && s.dir == "") {
		return false, nil
	}
	empty, err := s.empty()
	if err != nil {
		return false, err
	}
	if path == WriteBulk && !empty {
		return false, fmt.Errorf("%s: bulk ingest needs an empty store, and this one holds data; leave out the bulk path to add to it", s.name())
	}
	return empty, nil
}

// empty reports whether the store holds nothing but its schema and totals
// records.
func (s *Store) empty() (bool, error) {
	empty := true
	err := s.db.View(func(txn *badger.Txn) error {
		it := txn.NewIterator(badger.IteratorOptions{})
		defer it.Close()
		for it.Rewind(); it.Valid(); it.Next() {
			k := it.Item().Key()
			if !bytes.Equal(k, metaKey(metaSchema)) && !bytes.Equal(k, metaKey(metaTotals)) {
				empty = false
				return nil
			}
		}
		return nil
	})
	if err != nil {
		return false, fmt.Errorf("%s: %w", s.name(), err)
	}
	return empty, nil
}

// bulkIngest is the state of one Ingest call on the bulk path. It reads every
// file into sorted runs, spilled to temporary files when they outgrow
// SortBufferBytes, then merges the runs in key order into Badger's
// StreamWriter, which builds the store's tables directly.
type bulkIngest struct {
	s    *Store
	opts IngestOptions

	files   []FileReport
	buf     sortBuffer
	runDir  string
	runs    []string
	seq     uint64
	scratch []byte

	totals    Stats
	users     map[osm.UserID]firstUser
	conflicts []seqConflict
}

// firstUser is the name of a uid as its earliest stored item gives it.
type firstUser struct {
	seq  uint64
	name string
}

type seqConflict struct {
	seq uint64
	c   Conflict
}

func ingestBulk(ctx context.Context, s *Store, paths []string, opts IngestOptions) (rep Report, err error) {
	b := &bulkIngest{s: s, opts: opts, users: make(map[osm.UserID]firstUser), files: make([]FileReport, 0, len(paths))}
	b.buf.reset()
	rep.Bulk = true
	defer func() {
		if b.runDir != "" {
			if rerr := os.RemoveAll(b.runDir); rerr != nil && err == nil {
				err = fmt.Errorf("remove temporary sort runs: %w", rerr)
			}
		}
		rep.Files, rep.Totals = b.files, b.totals
		for _, c := range b.conflicts {
			rep.Conflicts = append(rep.Conflicts, c.c)
		}
	}()

	readErr := b.readAll(ctx, paths)
	if ctx.Err() != nil {
		// Stop at once; the store is as empty as before.
		for i := range b.files {
			b.files[i].FileRecord = FileRecord{Path: b.files[i].Path, Size: b.files[i].Size, SHA256: b.files[i].SHA256, Format: b.files[i].Format}
		}
		return rep, ctx.Err()
	}
	if err := b.write(ctx); err != nil {
		return rep, err
	}
	return rep, readErr
}

// readAll reads the files into runs. It returns the joined parse errors of
// abandoned files, or the first other error, after which it reads no more.
func (b *bulkIngest) readAll(ctx context.Context, paths []string) error {
	done := map[string]bool{}
	var fileErrs []error
	for i, path := range paths {
		if err := ctx.Err(); err != nil {
			return err
		}
		b.files = append(b.files, FileReport{FileRecord: FileRecord{Path: path}})
		fr := &b.files[i]
		err := b.readFile(ctx, i, path, fr, done)
		if err == nil {
			continue
		}
		fr.Err = err
		if errors.As(err, new(*osmfile.ParseError)) {
			fileErrs = append(fileErrs, err)
			continue
		}
		return err
	}
	return errors.Join(fileErrs...)
}

func (b *bulkIngest) readFile(ctx context.Context, fi int, path string, fr *FileReport, done map[string]bool) error {
	start := time.Now()
	defer func() { fr.Elapsed = time.Since(start) }()
	size, sum, err := hashFile(path)
	if err != nil {
		return err
	}
	fr.Size, fr.SHA256 = size, sum
	if done[sum] {
		fr.Skipped = true
		return nil
	}
	r, err := b.opts.Open(ctx, path)
	if err != nil {
		return err
	}
	defer r.Close()
	fr.Format = r.Format().String()
	b.opts.Progress.Start(path, size)
	defer b.opts.Progress.Finish()

	rec := record{file: fi}
	for r.Scan() {
		it := r.Item()
		fr.Items++
		switch {
		case it.Object != nil:
			tb, id, ver, err := versionKeyParts(it.Object)
			if err != nil {
				return fmt.Errorf("ingest: %s: %s: %w", path, it.Pos, err)
			}
			b.scratch = appendVersionKey(b.scratch[:0], tb, id, ver)
			n := len(b.scratch)
			if b.scratch, err = appendVersionValue(b.scratch, it.Object); err != nil {
				return fmt.Errorf("%s: %s: %w", path, it.Pos, err)
			}
			rec.key, rec.val = b.scratch[:n], b.scratch[n:]
		case it.Changeset != nil:
			b.scratch = append(b.scratch[:0], changesetKey(int64(it.Changeset.ID))...)
			n := len(b.scratch)
			b.scratch = appendChangesetValue(b.scratch, it.Changeset)
			rec.key, rec.val = b.scratch[:n], b.scratch[n:]
		default:
			continue
		}
		rec.seq, rec.pos = b.seq, it.Pos
		b.seq++
		if err := b.add(&rec); err != nil {
			return err
		}
		if fr.Items%int64(b.opts.BatchEntries) == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
			b.opts.Progress.Update(r.BytesRead(), fr.Items)
		}
	}
	if err := r.Err(); err != nil {
		return err
	}
	b.opts.Progress.Update(r.BytesRead(), fr.Items)
	done[sum] = true
	// The file's record is written with the store; its time of completion
	// is when its last item was read, which keeps the files in order.
	fr.Completed = time.Now().UTC()
	return nil
}

// versionKeyParts returns the key parts of an object version.
func versionKeyParts(o osm.Object) (tb byte, id int64, version int, err error) {
	switch o := o.(type) {
	case *osm.Node:
		return typeNode, int64(o.ID), o.Version, nil
	case *osm.Way:
		return typeWay, int64(o.ID), o.Version, nil
	case *osm.Relation:
		return typeRelation, int64(o.ID), o.Version, nil
	}
	return 0, 0, 0, fmt.Errorf("unexpected object %T", o)
}

// add puts a record into the sort buffer, spilling the buffer first when the
// record would take it past its budget.
func (b *bulkIngest) add(r *record) error {
	if len(b.buf.data)+len(r.key)+len(r.val)+recordOverhead > b.opts.SortBufferBytes && b.buf.len() > 0 {
		if b.runDir == "" {
			dir, err := b.tempDir()
			if err != nil {
				return err
			}
			b.runDir = dir
		}
		path, err := b.buf.spill(b.runDir, len(b.runs))
		if err != nil {
			return fmt.Errorf("%s: %w", b.s.name(), err)
		}
		b.runs = append(b.runs, path)
		b.buf.reset()
	}
	b.buf.add(r, b.opts.SortBufferBytes)
	return nil
}

// tempDir makes the folder for spilled runs: inside the store's folder (the
// same disk, which has room for the store) unless IngestOptions.TempDir says
// otherwise. Folders left by a killed ingest are removed first.
func (b *bulkIngest) tempDir() (string, error) {
	parent := b.opts.TempDir
	if parent == "" && b.s.dir != "" {
		parent = b.s.dir
		old, _ := filepath.Glob(filepath.Join(parent, runDirPrefix+"*"))
		for _, o := range old {
			os.RemoveAll(o)
		}
	}
	dir, err := os.MkdirTemp(parent, runDirPrefix)
	if err != nil {
		return "", fmt.Errorf("%s: folder for sort runs: %w", b.s.name(), err)
	}
	return dir, nil
}

// write merges the runs into the store through a StreamWriter. The marker
// file is in place from before the store is emptied until the last table is
// written, so that an interruption is seen on the next open.
func (b *bulkIngest) write(ctx context.Context) (err error) {
	s := b.s
	if err := b.reduceRuns(ctx); err != nil {
		return err
	}
	b.buf.sort()
	cursors := []cursor{&memCursor{b: &b.buf}}
	for _, path := range b.runs {
		c, err := openRun(path)
		if err != nil {
			return fmt.Errorf("%s: %w", s.name(), err)
		}
		defer c.close()
		cursors = append(cursors, c)
	}

	if err := b.setMarker(); err != nil {
		return err
	}
	s.interrupted.Store(true)
	sw := s.db.NewStreamWriter()
	if err := sw.Prepare(); err != nil {
		sw.Cancel()
		return fmt.Errorf("%s: prepare bulk write: %w", s.name(), err)
	}
	out := &streamOut{sw: sw, buf: z.NewBuffer(2*bulkFlushBytes, "ingest.bulk")}
	defer out.buf.Release()
	defer func() {
		if err != nil {
			sw.Cancel()
		}
	}()

	if err := b.merge(ctx, newMerger(cursors), out); err != nil {
		return err
	}
	if err := b.writeMeta(out); err != nil {
		return err
	}
	out.done()
	if err := out.flush(); err != nil {
		return err
	}
	if err := sw.Flush(); err != nil {
		return fmt.Errorf("%s: finish bulk write: %w", s.name(), err)
	}
	if err := b.clearMarker(); err != nil {
		return err
	}
	s.interrupted.Store(false)
	return nil
}

// maxFanIn is how many spilled runs one merge reads at once; each holds a
// read buffer, so more runs are first merged in groups into longer ones,
// which keeps memory flat however large the input.
const maxFanIn = 64

// reduceRuns merges groups of spilled runs until at most maxFanIn are left.
func (b *bulkIngest) reduceRuns(ctx context.Context) error {
	runs, err := reduceRunFiles(ctx, b.runs, b.runDir)
	if err != nil {
		return fmt.Errorf("%s: %w", b.s.name(), err)
	}
	b.runs = runs
	return nil
}

// reduceRunFiles merges groups of the sorted runs into longer runs in dir
// until at most maxFanIn are left, and returns the runs left.
func reduceRunFiles(ctx context.Context, runs []string, dir string) ([]string, error) {
	for len(runs) > maxFanIn {
		var next []string
		for i := 0; i < len(runs); i += maxFanIn {
			group := runs[i:min(i+maxFanIn, len(runs))]
			path, err := mergeRuns(ctx, group, filepath.Join(dir, fmt.Sprintf("merged-%d-%05d", len(runs), len(next))))
			if err != nil {
				return nil, err
			}
			next = append(next, path)
		}
		runs = next
	}
	return runs, nil
}

func (b *bulkIngest) setMarker() error {
	if b.s.dir == "" {
		return nil
	}
	path := filepath.Join(b.s.dir, bulkMarker)
	f, err := os.Create(path)
	if err == nil {
		_, err = f.WriteString("A loadwake bulk ingest is writing this store. If this file is still here when no\n" +
			"loadwake runs, the ingest was interrupted: run loadwake ingest again with the same files.\n")
		if serr := f.Sync(); err == nil {
			err = serr
		}
		if cerr := f.Close(); err == nil {
			err = cerr
		}
	}
	if err == nil {
		err = syncDir(b.s.dir)
	}
	if err != nil {
		return fmt.Errorf("%s: mark bulk ingest: %w", b.s.name(), err)
	}
	return nil
}

func (b *bulkIngest) clearMarker() error {
	if b.s.dir == "" {
		return nil
	}
	if err := b.s.db.Sync(); err != nil {
		return fmt.Errorf("%s: sync: %w", b.s.name(), err)
	}
	err := os.Remove(filepath.Join(b.s.dir, bulkMarker))
	if err == nil {
		err = syncDir(b.s.dir)
	}
	if err != nil && !errors.Is(err, os.ErrNotExist) {
		return fmt.Errorf("%s: unmark bulk ingest: %w", b.s.name(), err)
	}
	return nil
}

func syncDir(dir string) error {
	d, err := os.Open(dir)
	if err != nil {
		return err
	}
	err = d.Sync()
	if cerr := d.Close(); err == nil {
		err = cerr
	}
	return err
}

// streamOut batches entries for a StreamWriter. Streams come one after the
// other: a stream is closed when the next begins, so that Badger builds one
// table at a time (each table builder holds twice the table size).
type streamOut struct {
	sw     *badger.StreamWriter
	buf    *z.Buffer
	kv     pb.KV
	stream uint32 // the open stream, 0 for none
}

func (o *streamOut) put(stream uint32, key, val []byte) error {
	if stream != o.stream {
		o.done()
		o.stream = stream
	}
	o.kv = pb.KV{Key: key, Value: val, Version: 1, StreamId: stream}
	badger.KVToBuffer(&o.kv, o.buf)
	if o.buf.LenNoPadding() >= bulkFlushBytes {
		return o.flush()
	}
	return nil
}

// done closes the open stream.
func (o *streamOut) done() {
	if o.stream != 0 {
		o.kv = pb.KV{StreamId: o.stream, StreamDone: true}
		badger.KVToBuffer(&o.kv, o.buf)
		o.stream = 0
	}
}

func (o *streamOut) flush() error {
	if o.buf.LenNoPadding() == 0 {
		return nil
	}
	if err := o.sw.Write(o.buf); err != nil {
		return fmt.Errorf("bulk write: %w", err)
	}
	o.buf.Reset()
	return nil
}

// merge walks the records in key order. Of the records under one key the
// earliest read is stored and the later ones are duplicates (same bytes) or
// conflicts (different bytes), except that a closed changeset replaces an
// open one, as on the transactional path.
func (b *bulkIngest) merge(ctx context.Context, m *merger, out *streamOut) error {
	var (
		cur      record // the record to store, copied
		curFirst uint64 // seq of the first record under cur.key
		curFile  int    // file of that record
		have     bool
		lastObj  [objectPrefixLen]byte
		n        int
	)
	emit := func() error {
		if !have {
			return nil
		}
		return b.store(&cur, curFirst, curFile, &lastObj, out)
	}
	for {
		r, err := m.next()
		if err != nil {
			return fmt.Errorf("%s: %w", b.s.name(), err)
		}
		if r == nil {
			break
		}
		if n++; n%scanBatch == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		if have && bytes.Equal(r.key, cur.key) {
			b.later(&cur, r)
			continue
		}
		if err := emit(); err != nil {
			return err
		}
		cur.key = append(cur.key[:0], r.key...)
		cur.val = append(cur.val[:0], r.val...)
		cur.seq, cur.file, cur.pos = r.seq, r.file, r.pos
		curFirst, curFile, have = r.seq, r.file, true
	}
	return emit()
}

// later handles a record under the same key as cur, read after it.
func (b *bulkIngest) later(cur, r *record) {
	fr := &b.files[r.file].FileRecord
	switch {
	case bytes.Equal(r.val, cur.val):
		fr.Duplicates++
	case cur.key[0] == prefixChangeset && len(cur.val) > 1 && cur.val[1]&flagOpen != 0 && len(r.val) > 1 && r.val[1]&flagOpen == 0:
		cur.val = append(cur.val[:0], r.val...)
		fr.Updated++
	default:
		fr.Conflicts++
		var object string
		if tb, id, ver, ok := parseVersionKey(r.key); ok {
			object = fmt.Sprintf("%s/%d v%d", typeOfByte(tb), id, ver)
		} else {
			object = fmt.Sprintf("changeset/%d", getID(r.key[1:]))
		}
		b.conflict(r.seq, Conflict{File: fr.Path, Pos: r.pos, Object: object})
	}
}

// conflict keeps the MaxConflictExamples earliest conflicts in reading order,
// as the transactional path reports them.
func (b *bulkIngest) conflict(seq uint64, c Conflict) {
	max := b.opts.MaxConflictExamples
	if max <= 0 {
		return
	}
	b.conflicts = append(b.conflicts, seqConflict{seq, c})
	if len(b.conflicts) >= 2*max {
		b.trimConflicts()
	}
}

func (b *bulkIngest) trimConflicts() {
	slices.SortFunc(b.conflicts, func(x, y seqConflict) int {
		if x.seq < y.seq {
			return -1
		}
		if x.seq > y.seq {
			return 1
		}
		return 0
	})
	b.conflicts = b.conflicts[:min(len(b.conflicts), max(b.opts.MaxConflictExamples, 0))]
}

// store writes the record chosen for a key and counts it.
func (b *bulkIngest) store(r *record, firstSeq uint64, firstFile int, lastObj *[objectPrefixLen]byte, out *streamOut) error {
	fr := &b.files[firstFile].FileRecord
	if r.key[0] == prefixChangeset {
		uid, user, err := summarizeChangeset(r.val)
		if err != nil {
			return fmt.Errorf("%s: changeset/%d: %w", b.s.name(), getID(r.key[1:]), err)
		}
		fr.Changesets++
		b.totals.Changesets++
		b.user(uid, user, firstSeq)
		return out.put(streamChangesets, r.key, r.val)
	}
	tb := r.key[1]
	sum, err := summarizeVersion(tb, r.val)
	if err != nil {
		_, id, ver, _ := parseVersionKey(r.key)
		return fmt.Errorf("%s: %s/%d v%d: %w", b.s.name(), typeOfByte(tb), id, ver, err)
	}
	newObject := !bytes.Equal(lastObj[:], r.key[:objectPrefixLen])
	copy(lastObj[:], r.key)
	fr.Versions++
	var ts time.Time
	if sum.ts != 0 {
		ts = time.Unix(sum.ts, 0)
	}
	b.totals.addVersion(tb, newObject, sum.visible, orb.Point{sum.lon, sum.lat}, ts)
	b.user(sum.uid, sum.user, firstSeq)
	return out.put(streamVersions, r.key, r.val)
}

// user notes the name of uid when this stored item is the earliest read with it.
func (b *bulkIngest) user(uid osm.UserID, name []byte, seq uint64) {
	if uid == 0 {
		return
	}
	if u, ok := b.users[uid]; ok && u.seq <= seq {
		return
	}
	b.users[uid] = firstUser{seq: seq, name: string(name)}
}

// writeMeta writes the schema, totals, file and user records, in key order.
func (b *bulkIngest) writeMeta(out *streamOut) error {
	b.totals.Users = int64(len(b.users))
	type kv struct{ k, v []byte }
	var recs []kv
	recs = append(recs, kv{metaKey(metaSchema), fmt.Appendf(nil, "%d", SchemaVersion)})
	tot, err := json.Marshal(b.totals)
	if err != nil {
		return err
	}
	recs = append(recs, kv{metaKey(metaTotals), tot})
	for i := range b.files {
		f := &b.files[i]
		if f.Err != nil || f.Skipped || f.Completed.IsZero() {
			continue
		}
		rec, err := json.Marshal(f.FileRecord)
		if err != nil {
			return err
		}
		recs = append(recs, kv{metaKey(metaFilePrefix + f.SHA256), rec})
	}
	for uid, u := range b.users {
		key := make([]byte, 1+len(metaUserPrefix)+8)
		copy(key, metaKey(metaUserPrefix))
		putID(key[1+len(metaUserPrefix):], int64(uid))
		recs = append(recs, kv{key, []byte(u.name)})
	}
	slices.SortFunc(recs, func(x, y kv) int { return bytes.Compare(x.k, y.k) })
	for _, r := range recs {
		if err := out.put(streamMeta, r.k, r.v); err != nil {
			return err
		}
	}
	b.trimConflicts()
	return nil
}
