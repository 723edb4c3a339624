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
	"strconv"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/dgraph-io/badger/v4"
	"github.com/dgraph-io/badger/v4/options"
	"github.com/loadwake/loadwake/ingest/internal/codec"
	"github.com/loadwake/loadwake/ingest/internal/storedir"
	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// Sentinel errors of the store; test with errors.Is.
var (
	ErrLocked      = errors.New("ingest: store is in use by another process")
	ErrSchemaNewer = errors.New("ingest: store was written by a newer loadwake")
)

// SchemaVersion is the layout version this loadwake writes and reads. A store
// with a higher number is refused with ErrSchemaNewer.
const SchemaVersion = 1

// scanBatch is how many keys a scan reads between checks of its context.
const scanBatch = 1024

// Logger receives the store's occasional messages. Implementations must be
// safe for concurrent use.
type Logger interface {
	Printf(format string, args ...any)
}

type nopLogger struct{}

func (nopLogger) Printf(string, ...any) {}

// BlockCompression selects how the store compresses its table blocks.
type BlockCompression uint8

// The block compression choices.
const (
	BlockUncompressed BlockCompression = iota
	BlockSnappy
	BlockZSTD
)

// Options configures a Store. Build one with DefaultOptions and the WithX
// setters, which return a modified copy.
type Options struct {
	logger       Logger
	verbose      bool
	compression  BlockCompression
	memTableSize int64
	blockCache   int64
	indexCache   int64
	tableSize    int64
	compactors   int
	syncWrites   bool
	mappedRes    int64 // see WithMappedResident
}

// DefaultOptions returns options tuned for loading on a small machine in
// bounded memory: two compactors, 32 MiB memtables, a 32 MiB block cache, a
// 32 MiB cache of table indexes and Bloom filters (so that their memory does
// not grow with the store), tables of 4 MiB at every level (Badger's table
// builders hold several times a table's size each, uncompressed), Snappy
// compression, no fsync per write (an interrupted ingest loses at most the
// unflushed batches, which a rerun writes again) and a silent logger.
func DefaultOptions() Options {
	return Options{
		logger:       nopLogger{},
		compression:  BlockSnappy,
		memTableSize: 32 << 20,
		blockCache:   32 << 20,
		indexCache:   32 << 20,
		tableSize:    4 << 20,
		compactors:   2,
		mappedRes:    storedir.DefaultMappedResident,
	}
}

// WithMappedResident returns a copy that keeps at most about n bytes of the
// store's memory-mapped files in the process's resident set (on Linux; 0
// leaves them to the kernel). Badger maps its table files and reads and
// writes them through the mappings, so without a limit every table a long
// scan or a large write touches stays resident until the store is closed,
// and the process's resident set grows with the store. Above the limit the
// store asks the kernel to reclaim those pages (they are file pages: nothing
// is lost, a page used again is read again). The default is 256 MiB.
func (o Options) WithMappedResident(n int64) Options { o.mappedRes = n; return o }

// WithLogger returns a copy that sends messages to l; nil means silent.
func (o Options) WithLogger(l Logger) Options {
	if l == nil {
		l = nopLogger{}
	}
	o.logger = l
	return o
}

// WithVerbose returns a copy that also forwards Badger's informational and
// warning messages to the logger; by default only its errors are forwarded.
func (o Options) WithVerbose(v bool) Options { o.verbose = v; return o }

// WithCompression returns a copy with block compression c.
func (o Options) WithCompression(c BlockCompression) Options { o.compression = c; return o }

// WithMemTableSize returns a copy with memtables of n bytes (at least 4 MiB is sensible).
func (o Options) WithMemTableSize(n int64) Options { o.memTableSize = n; return o }

// WithBlockCacheSize returns a copy with a block cache of n bytes.
func (o Options) WithBlockCacheSize(n int64) Options { o.blockCache = n; return o }

// WithIndexCacheSize returns a copy with a cache of n bytes for table
// indexes and Bloom filters; 0 keeps all of them in memory, which grows with
// the store.
func (o Options) WithIndexCacheSize(n int64) Options { o.indexCache = n; return o }

// WithTableSize returns a copy whose tables hold about n bytes (compressed)
// at every level. Memory while writing grows with it: a table builder holds
// a table's blocks both uncompressed and compressed.
func (o Options) WithTableSize(n int64) Options { o.tableSize = n; return o }

// WithCompactors returns a copy running n compactors (Badger needs at least 2).
func (o Options) WithCompactors(n int) Options { o.compactors = max(n, 2); return o }

// WithSyncWrites returns a copy that fsyncs each committed batch.
func (o Options) WithSyncWrites(v bool) Options { o.syncWrites = v; return o }

// badgerLogger adapts a Logger to Badger's four-level logger.
type badgerLogger struct {
	l       Logger
	verbose bool
}

func (b badgerLogger) Errorf(f string, a ...any) {
	b.l.Printf("store error: "+strings.TrimRight(f, "\n"), a...)
}
func (b badgerLogger) Warningf(f string, a ...any) {
	if b.verbose {
		b.l.Printf("store warning: "+strings.TrimRight(f, "\n"), a...)
	}
}
func (b badgerLogger) Infof(f string, a ...any) {
	if b.verbose {
		b.l.Printf("store: "+strings.TrimRight(f, "\n"), a...)
	}
}
func (b badgerLogger) Debugf(string, ...any) {}

// log returns the logger, silent when none was set.
func (o Options) log() Logger {
	if o.logger == nil {
		return nopLogger{}
	}
	return o.logger
}

func (o Options) badger(dir string) badger.Options {
	if o.logger == nil {
		o.logger = nopLogger{}
	}
	bo := badger.DefaultOptions(dir).
		WithLogger(badgerLogger{l: o.logger, verbose: o.verbose}).
		WithNumCompactors(max(o.compactors, 2)).
		WithNumGoroutines(2).
		WithMemTableSize(o.memTableSize).
		WithNumMemtables(3).
		WithBlockCacheSize(o.blockCache).
		WithIndexCacheSize(o.indexCache).
		WithDetectConflicts(false).
		WithSyncWrites(o.syncWrites).
		WithMetricsEnabled(false)
	if o.tableSize > 0 {
		// The same table size at every level bounds the memory of each table
		// builder, and the bulk path's tables are no larger than the others.
		bo = bo.WithBaseTableSize(o.tableSize)
		bo.TableSizeMultiplier = 1
	}
	switch o.compression {
	case BlockUncompressed:
		bo = bo.WithCompression(options.None)
	case BlockZSTD:
		bo = bo.WithCompression(options.ZSTD)
	default:
		bo = bo.WithCompression(options.Snappy)
	}
	return bo
}

// Store is the history store: every version of every object, changeset
// records, metadata and derived data, in one Badger database. Its methods are
// safe for concurrent use; ingests into one Store run one at a time.
type Store struct {
	db   *badger.DB
	dir  string // "" in memory
	opts Options

	writeMu  sync.Mutex       // serialises Ingest
	resident *storedir.Keeper // bounds the mapped files' resident pages
	// interrupted is set while the store holds the remains of a bulk ingest
	// that did not finish (its marker file is in dir): reads refuse it with
	// ErrInterrupted and the next Ingest starts the bulk ingest again.
	interrupted atomic.Bool
}

// usable returns ErrInterrupted, wrapped with the store's name, while the
// store holds an unfinished bulk ingest.
func (s *Store) usable() error {
	if s.interrupted.Load() {
		return fmt.Errorf("%s: %w; run loadwake ingest again with the same files", s.name(), ErrInterrupted)
	}
	return nil
}

// ErrNotStore marks a --store folder that holds something other than a
// loadwake store: files of the user's, or another program's Badger database.
// Open refuses it rather than write among those files.
var ErrNotStore = errors.New("ingest: folder is not a loadwake store")

// ErrInterrupted marks a store whose bulk ingest was interrupted (a crash,
// kill or power loss while it wrote): its contents are incomplete until an
// ingest of the same files runs again, which starts over from the empty store.
var ErrInterrupted = errors.New("ingest: store holds an interrupted bulk ingest")

// Open opens or creates the store in directory dir (the store constructor of
// the read API contract in DEVELOPERS.md; stream readers come from osmfile.OpenFile). A store that another
// process holds gives an error wrapping ErrLocked; one written by a newer
// loadwake gives ErrSchemaNewer. A folder that exists, is not empty and holds
// no loadwake store gives ErrNotStore, and nothing is written into it.
func Open(dir string, opts Options) (*Store, error) {
	if err := checkStoreFolder(dir); err != nil {
		return nil, err
	}
	storedir.RemoveEmptyMemtables(dir)
	db, err := badger.Open(opts.badger(dir))
	if err != nil {
		if strings.Contains(err.Error(), "Cannot acquire directory lock") {
			return nil, fmt.Errorf("open store %s: %w (close the other loadwake, or use another --store)", dir, ErrLocked)
		}
		return nil, fmt.Errorf("open store %s: %v", dir, err)
	}
	return newStore(db, dir, opts)
}

// OpenInMemory opens an empty store held in memory, for tests and the demo.
func OpenInMemory(opts Options) (*Store, error) {
	db, err := badger.Open(opts.badger("").WithInMemory(true))
	if err != nil {
		return nil, fmt.Errorf("open in-memory store: %v", err)
	}
	return newStore(db, "", opts)
}

// checkStoreFolder refuses a folder that exists, is not empty and holds
// neither a Badger manifest nor only the files a store makes (Badger's, the
// bulk path's marker and runs).
func checkStoreFolder(dir string) error {
	names, others, err := storedir.Foreign(dir, func(name string) bool {
		return name == bulkMarker || strings.HasPrefix(name, runDirPrefix)
	})
	if err != nil {
		return fmt.Errorf("open store %s: %w", dir, err)
	}
	if others == 0 {
		return nil
	}
	more := ""
	if others > len(names) {
		more = fmt.Sprintf(" and %d more", others-len(names))
	}
	return fmt.Errorf("open store %s: %w: the folder holds other files (%s%s); give --store a new or empty folder, or the folder of an existing store",
		dir, ErrNotStore, strings.Join(names, ", "), more)
}

func newStore(db *badger.DB, dir string, opts Options) (*Store, error) {
	s := &Store{db: db, dir: dir, opts: opts}
	if dir != "" {
		if _, err := os.Stat(filepath.Join(dir, bulkMarker)); err == nil {
			s.interrupted.Store(true)
			opts.log().Printf("%s: an earlier bulk ingest was interrupted; the next ingest starts it again", s.name())
		}
	}
	if err := s.checkSchema(); err != nil {
		db.Close()
		return nil, err
	}
	s.resident = storedir.StartKeeper(dir, opts.mappedRes)
	return s, nil
}

// name is how errors refer to the store.
func (s *Store) name() string {
	if s.dir == "" {
		return "in-memory store"
	}
	return "store " + s.dir
}

func (s *Store) checkSchema() error {
	return s.db.Update(func(txn *badger.Txn) error {
		item, err := txn.Get(codec.MetaKey(metaSchema))
		if errors.Is(err, badger.ErrKeyNotFound) {
			it := txn.NewIterator(badger.IteratorOptions{})
			it.Rewind()
			empty := !it.Valid()
			it.Close()
			if !empty && !s.interrupted.Load() {
				return fmt.Errorf("%s: %w: %w: not a loadwake store (no schema record); give --store a new or empty folder",
					s.name(), ErrNotStore, osmfile.ErrFormat)
			}
			return txn.Set(codec.MetaKey(metaSchema), []byte(strconv.Itoa(SchemaVersion)))
		}
		if err != nil {
			return fmt.Errorf("%s: read schema: %w", s.name(), err)
		}
		v, err := item.ValueCopy(nil)
		if err != nil {
			return fmt.Errorf("%s: read schema: %w", s.name(), err)
		}
		n, err := strconv.Atoi(string(v))
		if err != nil {
			return fmt.Errorf("%s: %w: bad schema record %q", s.name(), osmfile.ErrFormat, v)
		}
		if n > SchemaVersion {
			return fmt.Errorf("%s has schema %d but this loadwake reads up to %d; use a newer loadwake: %w",
				s.name(), n, SchemaVersion, ErrSchemaNewer)
		}
		return nil
	})
}

// Close flushes and closes the store.
func (s *Store) Close() error {
	s.resident.Close()
	if err := s.db.Close(); err != nil {
		return fmt.Errorf("close %s: %v", s.name(), err)
	}
	return nil
}

// Metadata record names, under the m prefix.
const (
	metaSchema     = "schema"
	metaTotals     = "totals"
	metaFilePrefix = "file/" // + hex SHA-256
	metaUserPrefix = "user/" // + 8-byte uid
)

// scanPrefix iterates the keys under prefix in order, calling fn with key and
// value bytes that are valid only inside fn. It checks ctx every scanBatch keys.
func (s *Store) scanPrefix(ctx context.Context, prefix []byte, fn func(k, v []byte) error) error {
	if err := s.usable(); err != nil {
		return err
	}
	return s.db.View(func(txn *badger.Txn) error {
		opt := badger.DefaultIteratorOptions
		opt.Prefix = prefix
		opt.PrefetchSize = 64
		it := txn.NewIterator(opt)
		defer it.Close()
		n := 0
		for it.Seek(prefix); it.Valid(); it.Next() {
			if n++; n%scanBatch == 0 {
				if err := ctx.Err(); err != nil {
					return err
				}
			}
			item := it.Item()
			if err := item.Value(func(v []byte) error { return fn(item.Key(), v) }); err != nil {
				return err
			}
		}
		return ctx.Err()
	})
}

// ScanVersions calls fn with every stored version of type t (osm.TypeNode,
// TypeWay or TypeRelation) in key order: id ascending, then version ascending.
// Each object is freshly allocated and fn may keep it. An error from fn stops
// the scan and is returned.
func (s *Store) ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error {
	tb, err := codec.TypeByte(t)
	if err != nil {
		return err
	}
	return s.scanPrefix(ctx, []byte{codec.PrefixVersion, tb}, func(k, v []byte) error {
		o, err := codec.DecodeVersion(k, v)
		if err != nil {
			return fmt.Errorf("%s: %w", s.name(), err)
		}
		return fn(o)
	})
}

// ObjectVersions returns all stored versions of one object in version order;
// none is an empty slice and no error.
func (s *Store) ObjectVersions(ctx context.Context, t osm.Type, id int64) ([]osm.Object, error) {
	tb, err := codec.TypeByte(t)
	if err != nil {
		return nil, err
	}
	var out []osm.Object
	err = s.scanPrefix(ctx, codec.ObjectPrefix(tb, id), func(k, v []byte) error {
		o, err := codec.DecodeVersion(k, v)
		if err != nil {
			return fmt.Errorf("%s: %w", s.name(), err)
		}
		out = append(out, o)
		return nil
	})
	return out, err
}

// NodeAt returns the position of node id valid at time at: that of the
// highest version whose timestamp is not after at. ok is false when there is
// no such version or it is a deletion.
func (s *Store) NodeAt(ctx context.Context, id osm.NodeID, at time.Time) (p orb.Point, ok bool, err error) {
	if err := ctx.Err(); err != nil {
		return p, false, err
	}
	if err := s.usable(); err != nil {
		return p, false, err
	}
	prefix := codec.ObjectPrefix(codec.TypeNode, int64(id))
	err = s.db.View(func(txn *badger.Txn) error {
		opt := badger.DefaultIteratorOptions
		opt.Prefix = prefix
		opt.PrefetchValues = false
		it := txn.NewIterator(opt)
		defer it.Close()
		for it.Seek(prefix); it.Valid(); it.Next() {
			item := it.Item()
			err := item.Value(func(v []byte) error {
				ts, visible, lat, lon, err := codec.DecodeNodePosition(v)
				if err != nil {
					return fmt.Errorf("%s: node/%d: %w", s.name(), id, err)
				}
				if ts.After(at) {
					return nil
				}
				p, ok = orb.Point{lon, lat}, visible
				if !visible {
					p = orb.Point{}
				}
				return nil
			})
			if err != nil {
				return err
			}
		}
		return nil
	})
	return p, ok, err
}

// ScanChangesets calls fn with every stored changeset record in id order.
// Each changeset is freshly allocated and fn may keep it.
func (s *Store) ScanChangesets(ctx context.Context, fn func(c *osm.Changeset) error) error {
	return s.scanPrefix(ctx, []byte{codec.PrefixChangeset}, func(k, v []byte) error {
		c, err := codec.DecodeChangeset(k, v)
		if err != nil {
			return fmt.Errorf("%s: %w", s.name(), err)
		}
		return fn(c)
	})
}

// Changeset returns the changeset record with the given id; ok is false when
// the store has none.
func (s *Store) Changeset(ctx context.Context, id osm.ChangesetID) (*osm.Changeset, bool, error) {
	if err := ctx.Err(); err != nil {
		return nil, false, err
	}
	if err := s.usable(); err != nil {
		return nil, false, err
	}
	key := codec.ChangesetKey(int64(id))
	var c *osm.Changeset
	err := s.db.View(func(txn *badger.Txn) error {
		item, err := txn.Get(key)
		if errors.Is(err, badger.ErrKeyNotFound) {
			return nil
		}
		if err != nil {
			return err
		}
		return item.Value(func(v []byte) error {
			c, err = codec.DecodeChangeset(key, v)
			return err
		})
	})
	if err != nil {
		return nil, false, fmt.Errorf("%s: changeset %d: %w", s.name(), id, err)
	}
	return c, c != nil, nil
}

// derivedKey prefixes an owner's key with the derived-data prefix.
func derivedKey(key []byte) []byte {
	k := make([]byte, 1+len(key))
	k[0] = codec.PrefixDerived
	copy(k[1:], key)
	return k
}

// PutDerived writes derived data: fill calls put for each key and value, which
// are copied. Writes go out in batches; they are not atomic as a whole, so an
// owner that is interrupted drops its prefix and writes again. It checks ctx
// every scanBatch puts.
func (s *Store) PutDerived(ctx context.Context, fill func(put func(key, value []byte) error) error) error {
	if err := s.usable(); err != nil {
		return err
	}
	wb := s.db.NewWriteBatch()
	n := 0
	put := func(key, value []byte) error {
		if len(key) == 0 {
			return errors.New("ingest: empty derived key")
		}
		if n++; n%scanBatch == 0 {
			if err := ctx.Err(); err != nil {
				return err
			}
		}
		return wb.Set(derivedKey(key), bytes.Clone(value))
	}
	if err := fill(put); err != nil {
		wb.Cancel()
		return err
	}
	if err := wb.Flush(); err != nil {
		return fmt.Errorf("%s: write derived data: %w", s.name(), err)
	}
	return nil
}

// ScanDerived calls fn for each derived key with the given prefix, in key
// order. key and value are valid only inside fn; copy what you keep.
func (s *Store) ScanDerived(ctx context.Context, prefix []byte, fn func(key, value []byte) error) error {
	return s.scanPrefix(ctx, derivedKey(prefix), func(k, v []byte) error { return fn(k[1:], v) })
}

// GetDerived returns a copy of the value under a derived key.
func (s *Store) GetDerived(ctx context.Context, key []byte) ([]byte, bool, error) {
	if err := ctx.Err(); err != nil {
		return nil, false, err
	}
	if err := s.usable(); err != nil {
		return nil, false, err
	}
	var v []byte
	found := false
	err := s.db.View(func(txn *badger.Txn) error {
		item, err := txn.Get(derivedKey(key))
		if errors.Is(err, badger.ErrKeyNotFound) {
			return nil
		}
		if err != nil {
			return err
		}
		found = true
		v, err = item.ValueCopy(nil)
		return err
	})
	if err != nil {
		return nil, false, fmt.Errorf("%s: read derived data: %w", s.name(), err)
	}
	return v, found, nil
}

// DropDerived deletes every derived key with the given prefix; an empty
// prefix drops all derived data.
func (s *Store) DropDerived(ctx context.Context, prefix []byte) error {
	if err := ctx.Err(); err != nil {
		return err
	}
	if err := s.usable(); err != nil {
		return err
	}
	if err := s.db.DropPrefix(derivedKey(prefix)); err != nil {
		return fmt.Errorf("%s: drop derived data: %w", s.name(), err)
	}
	return nil
}

// Stats are the totals of a store, kept up to date by Ingest. Objects count
// distinct ids; versions count every stored version.
type Stats struct {
	Nodes            int64     `json:"nodes"`
	Ways             int64     `json:"ways"`
	Relations        int64     `json:"relations"`
	NodeVersions     int64     `json:"node_versions"`
	WayVersions      int64     `json:"way_versions"`
	RelationVersions int64     `json:"relation_versions"`
	DeletedVersions  int64     `json:"deleted_versions"`
	Changesets       int64     `json:"changesets"`
	Users            int64     `json:"users"`
	FirstEdit        time.Time `json:"first_edit"` // earliest version timestamp; zero when empty
	LastEdit         time.Time `json:"last_edit"`
	// BBox bounds every visible node version; valid only when HasBBox.
	BBox    orb.Bound `json:"bbox"`
	HasBBox bool      `json:"has_bbox"`
}

// Versions is the number of stored versions of all types.
func (st Stats) Versions() int64 { return st.NodeVersions + st.WayVersions + st.RelationVersions }

// FileRecord is what the store remembers about one completely ingested file.
type FileRecord struct {
	Path       string    `json:"path"`
	Size       int64     `json:"size"`
	SHA256     string    `json:"sha256"`
	Format     string    `json:"format"`
	Items      int64     `json:"items"`        // objects and changesets read
	Versions   int64     `json:"new_versions"` // versions newly stored
	Duplicates int64     `json:"duplicates"`   // versions and changesets already stored with identical bytes
	Conflicts  int64     `json:"conflicts"`    // stored with different bytes; the first kept
	Changesets int64     `json:"new_changesets"`
	Updated    int64     `json:"updated_changesets"` // open records replaced by closed ones
	Completed  time.Time `json:"completed"`
}

// Meta is the store's metadata record.
type Meta struct {
	Schema int          `json:"schema"`
	Files  []FileRecord `json:"files"` // ordered by completion time
	Totals Stats        `json:"totals"`
}

// Stats returns the store's totals.
func (s *Store) Stats(ctx context.Context) (Stats, error) {
	if err := ctx.Err(); err != nil {
		return Stats{}, err
	}
	if err := s.usable(); err != nil {
		return Stats{}, err
	}
	var st Stats
	err := s.db.View(func(txn *badger.Txn) error {
		var err error
		st, err = readTotals(txn)
		return err
	})
	if err != nil {
		return Stats{}, fmt.Errorf("%s: %w", s.name(), err)
	}
	return st, nil
}

func readTotals(txn *badger.Txn) (Stats, error) {
	var st Stats
	item, err := txn.Get(codec.MetaKey(metaTotals))
	if errors.Is(err, badger.ErrKeyNotFound) {
		return st, nil
	}
	if err != nil {
		return st, err
	}
	err = item.Value(func(v []byte) error { return json.Unmarshal(v, &st) })
	if err != nil {
		return st, fmt.Errorf("read totals: %w", err)
	}
	return st, nil
}

// Meta returns the schema version, the files ingested and the totals.
func (s *Store) Meta(ctx context.Context) (Meta, error) {
	m := Meta{Schema: SchemaVersion}
	st, err := s.Stats(ctx)
	if err != nil {
		return m, err
	}
	m.Totals = st
	err = s.scanPrefix(ctx, codec.MetaKey(metaFilePrefix), func(_, v []byte) error {
		var f FileRecord
		if err := json.Unmarshal(v, &f); err != nil {
			return fmt.Errorf("%s: file record: %w", s.name(), err)
		}
		m.Files = append(m.Files, f)
		return nil
	})
	slices.SortStableFunc(m.Files, func(a, b FileRecord) int { return a.Completed.Compare(b.Completed) })
	return m, err
}
