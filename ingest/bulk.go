package ingest

import (
	"bytes"
	"context"
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
	"github.com/loadwake/loadwake/ingest/internal/codec"
	"github.com/loadwake/loadwake/ingest/internal/sortrun"
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
			if !bytes.Equal(k, codec.MetaKey(metaSchema)) && !bytes.Equal(k, codec.MetaKey(metaTotals)) {
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
	buf     sortrun.Buffer
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
	b.buf.Reset()
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

	rec := sortrun.Record{File: fi}
	for r.Scan() {
		it := r.Item()
		fr.Items++
		switch {
		case it.Object != nil:
			tb, id, ver, err := versionKeyParts(it.Object)
			if err != nil {
				return fmt.Errorf("ingest: %s: %s: %w", path, it.Pos, err)
			}
			b.scratch = codec.AppendVersionKey(b.scratch[:0], tb, id, ver)
			n := len(b.scratch)
			if b.scratch, err = codec.AppendVersionValue(b.scratch, it.Object); err != nil {
				return fmt.Errorf("%s: %s: %w", path, it.Pos, err)
			}
			rec.Key, rec.Val = b.scratch[:n], b.scratch[n:]
		case it.Changeset != nil:
			b.scratch = append(b.scratch[:0], codec.ChangesetKey(int64(it.Changeset.ID))...)
			n := len(b.scratch)
			b.scratch = codec.AppendChangesetValue(b.scratch, it.Changeset)
			rec.Key, rec.Val = b.scratch[:n], b.scratch[n:]
		default:
			continue
		}
		rec.Seq, rec.Pos = b.seq, it.Pos
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
		return codec.TypeNode, int64(o.ID), o.Version, nil
	case *osm.Way:
		return codec.TypeWay, int64(o.ID), o.Version, nil
	case *osm.Relation:
		return codec.TypeRelation, int64(o.ID), o.Version, nil
	}
	return 0, 0, 0, fmt.Errorf("unexpected object %T", o)
}

// add puts a record into the sort buffer, spilling the buffer first when the
// record would take it past its budget.
func (b *bulkIngest) add(r *sortrun.Record) error {
	if b.buf.Size()+len(r.Key)+len(r.Val)+sortrun.RecordOverhead > b.opts.SortBufferBytes && b.buf.Len() > 0 {
		if b.runDir == "" {
			dir, err := b.tempDir()
			if err != nil {
				return err
			}
			b.runDir = dir
		}
		path, err := b.buf.Spill(b.runDir, len(b.runs))
		if err != nil {
			return fmt.Errorf("%s: %w", b.s.name(), err)
		}
		b.runs = append(b.runs, path)
		b.buf.Reset()
	}
	b.buf.Add(r, b.opts.SortBufferBytes)
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
	b.buf.Sort()
	cursors := []sortrun.Cursor{b.buf.Cursor()}
	for _, path := range b.runs {
		c, err := sortrun.OpenRun(path)
		if err != nil {
			return fmt.Errorf("%s: %w", s.name(), err)
		}
		defer c.Close()
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

	if err := b.merge(ctx, sortrun.NewMerger(cursors), out); err != nil {
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
	for len(b.runs) > maxFanIn {
		var next []string
		for i := 0; i < len(b.runs); i += maxFanIn {
			group := b.runs[i:min(i+maxFanIn, len(b.runs))]
			path, err := sortrun.MergeFiles(ctx, group, filepath.Join(b.runDir, fmt.Sprintf("merged-%d-%05d", len(b.runs), len(next))))
			if err != nil {
				return fmt.Errorf("%s: %w", b.s.name(), err)
			}
			next = append(next, path)
		}
		b.runs = next
	}
	return nil
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
func (b *bulkIngest) merge(ctx context.Context, m *sortrun.Merger, out *streamOut) error {
	var (
		cur      sortrun.Record // the record to store, copied
		curFirst uint64         // seq of the first record under cur.Key
		curFile  int            // file of that record
		have     bool
		lastObj  [codec.ObjectPrefixLen]byte
		n        int
	)
	emit := func() error {
		if !have {
			return nil
		}
		return b.store(&cur, curFirst, curFile, &lastObj, out)
	}
	for {
		r, err := m.Next()
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
		if have && bytes.Equal(r.Key, cur.Key) {
			b.later(&cur, r)
			continue
		}
		if err := emit(); err != nil {
			return err
		}
		cur.Key = append(cur.Key[:0], r.Key...)
		cur.Val = append(cur.Val[:0], r.Val...)
		cur.Seq, cur.File, cur.Pos = r.Seq, r.File, r.Pos
		curFirst, curFile, have = r.Seq, r.File, true
	}
	return emit()
}

// later handles a record under the same key as cur, read after it.
func (b *bulkIngest) later(cur, r *sortrun.Record) {
	fr := &b.files[r.File].FileRecord
	switch {
	case bytes.Equal(r.Val, cur.Val):
		fr.Duplicates++
	case cur.Key[0] == codec.PrefixChangeset && len(cur.Val) > 1 && cur.Val[1]&codec.FlagOpen != 0 && len(r.Val) > 1 && r.Val[1]&codec.FlagOpen == 0:
		cur.Val = append(cur.Val[:0], r.Val...)
		fr.Updated++
	default:
		fr.Conflicts++
		var object string
		if tb, id, ver, ok := codec.ParseVersionKey(r.Key); ok {
			object = fmt.Sprintf("%s/%d v%d", codec.TypeOfByte(tb), id, ver)
		} else {
			object = fmt.Sprintf("changeset/%d", codec.GetID(r.Key[1:]))
		}
		b.conflict(r.Seq, Conflict{File: fr.Path, Pos: r.Pos, Object: object})
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
func (b *bulkIngest) store(r *sortrun.Record, firstSeq uint64, firstFile int, lastObj *[codec.ObjectPrefixLen]byte, out *streamOut) error {
	fr := &b.files[firstFile].FileRecord
	if r.Key[0] == codec.PrefixChangeset {
		uid, user, err := codec.SummarizeChangeset(r.Val)
		if err != nil {
			return fmt.Errorf("%s: changeset/%d: %w", b.s.name(), codec.GetID(r.Key[1:]), err)
		}
		fr.Changesets++
		b.totals.Changesets++
		b.user(uid, user, firstSeq)
		return out.put(streamChangesets, r.Key, r.Val)
	}
	tb := r.Key[1]
	sum, err := codec.SummarizeVersion(tb, r.Val)
	if err != nil {
		_, id, ver, _ := codec.ParseVersionKey(r.Key)
		return fmt.Errorf("%s: %s/%d v%d: %w", b.s.name(), codec.TypeOfByte(tb), id, ver, err)
	}
	newObject := !bytes.Equal(lastObj[:], r.Key[:codec.ObjectPrefixLen])
	copy(lastObj[:], r.Key)
	fr.Versions++
	var ts time.Time
	if sum.TS != 0 {
		ts = time.Unix(sum.TS, 0)
	}
	b.totals.addVersion(tb, newObject, sum.Visible, orb.Point{sum.Lon, sum.Lat}, ts)
	b.user(sum.UID, sum.User, firstSeq)
	return out.put(streamVersions, r.Key, r.Val)
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
	recs = append(recs, kv{codec.MetaKey(metaSchema), fmt.Appendf(nil, "%d", SchemaVersion)})
	tot, err := json.Marshal(b.totals)
	if err != nil {
		return err
	}
	recs = append(recs, kv{codec.MetaKey(metaTotals), tot})
	for i := range b.files {
		f := &b.files[i]
		if f.Err != nil || f.Skipped || f.Completed.IsZero() {
			continue
		}
		rec, err := json.Marshal(f.FileRecord)
		if err != nil {
			return err
		}
		recs = append(recs, kv{codec.MetaKey(metaFilePrefix + f.SHA256), rec})
	}
	for uid, u := range b.users {
		key := make([]byte, 1+len(metaUserPrefix)+8)
		copy(key, codec.MetaKey(metaUserPrefix))
		codec.PutID(key[1+len(metaUserPrefix):], int64(uid))
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
