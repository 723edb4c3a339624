// Package ingest reads OpenStreetMap history files and keeps every version of
// every object, with changeset records, in an embedded Badger store.
//
// The file readers live in package osmfile; Ingest feeds them into a Store.
//
// # Key layout
//
// Package ingest/internal/codec encodes and decodes what this section and the
// next describe.
//
// All keys start with one prefix byte. Integers in keys are big-endian so that
// byte order is numeric order; 64-bit ids have their sign bit flipped
// (id XOR 1<<63) so that negative ids sort before positive ones.
//
//	v type id version   object versions: 'v', type 'n' | 'w' | 'r', id (8 bytes),
//	                    version (4 bytes). All versions of one object are
//	                    adjacent, in version order; objects in id order.
//	c id                changeset records: 'c', id (8 bytes)
//	m name              metadata: "m schema" (decimal schema version),
//	                    "m totals" (JSON Stats), "m file/<hex SHA-256>" (JSON
//	                    FileRecord of a completely ingested file),
//	                    "m user/<uid, 8 bytes>" (the first user name seen)
//	d ...               derived data: raw bytes owned by the packages that
//	                    write them (PutDerived, ScanDerived, DropDerived)
//
// # Value encoding
//
// Version and changeset values start with an encoding version byte (now 1).
// Integers are varints (encoding/binary); signed ones are zig-zag coded.
// Coordinates are degrees times 10^7, rounded (the API's fixed-point scale).
// Times are whole seconds since the Unix epoch, 0 for none. A string is its
// byte length as a uvarint, then the bytes. Tags are a uvarint count, then
// key and value strings in file order.
//
//	version value:   enc(1) flags(1: bit 0 visible) timestamp changeset uid user tags body
//	  node body:     lat lon (zig-zag varints)
//	  way body:      count, node refs as zig-zag deltas from the previous ref
//	  relation body: count, then per member: type byte ('n','w','r'),
//	                 ref as a zig-zag delta from the previous member's ref, role
//	changeset value: enc(1) flags(1: bit 0 open, bit 1 has bbox) created_at
//	                 closed_at num_changes(uvarint) uid user
//	                 [min_lat min_lon max_lat max_lon] tags
//
// The block compression of the store (Snappy by default) takes care of the
// repetition in tag strings and user names.
//
// # Writes
//
// Ingest has two write paths (IngestOptions.Path; by default the bulk path
// for an empty on-disk store and transactions otherwise). Both store a
// version under its key once: a key that already holds the same bytes adds
// nothing (a duplicate), one holding different bytes is a conflict that keeps
// the first value read and is reported; a closed changeset record replaces an
// open one. So a rerun adds nothing, and files may come in any order.
//
// The transactional path, for diffs into a store that holds data, writes in
// transactions of a few thousand entries; each commits atomically with the
// store's totals, and a file's record only with its last batch. Keys larger
// than the largest stored key of their type are known to be absent without a
// lookup, which keeps the ingest of sorted files close to decoding speed.
//
// The bulk path reads every file first. Encoded keys and values go into a
// sort buffer (IngestOptions.SortBufferBytes); a full buffer is sorted
// (unless its records came in key order, as a history file's do) and
// written to a temporary file, a sorted run (package ingest/internal/sortrun).
// At the end the runs are merged in key order, the earliest read record of
// each key winning, and written
// through Badger's StreamWriter, which builds the store's tables directly
// without its write-ahead log, memtables or compactions. Memory is bounded by
// the sort buffer and the table builders (see DefaultOptions), not by the
// input. While it writes, a marker file (LOADWAKE-BULK-INGEST) in the store's
// folder says so: a store opened with the marker present holds an
// interrupted bulk ingest, its reads fail with ErrInterrupted, and the next
// Ingest empties it and starts over, ending with the store a clean ingest
// makes. A bulk ingest stopped by its context while it reads stores nothing;
// a file abandoned at a parse error keeps the items read before the error,
// as the transactional path keeps its committed batches.
package ingest
