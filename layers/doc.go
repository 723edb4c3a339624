// Package layers classifies OpenStreetMap edits: each version of an object is
// compared with its predecessor and yields Events in the layers geometry,
// attribute, new_feature and deletion (plus bookkeeping for versions that only
// touched provenance keys), following the counting rules on Event.
//
// Classify is the pure comparison. Run is the classification pass over a
// history store (a Source, met by *ingest.Store): it scans nodes, then ways,
// then relations, classifies them on several goroutines, writes every event
// into the store's derived area, and records a Summary. ScanEvents, ScanChangesetEvents, FirstEdits and Summarize
// read the results back. The package uses the rules package only through the
// Rules interface and never imports ingest.
//
// # Derived keys
//
// Every key this package writes starts with "d|" followed by one letter; the
// integers are big-endian so keys sort numerically. TIME is unix seconds with
// the sign bit flipped (8 bytes; sorts like the signed number); TYPE is one
// byte 'n', 'w' or 'r'; ID is 8 bytes, VERSION 4 bytes, LAYER one byte (the
// Layer value).
//
//	d|E|TIME|TYPE|ID|VERSION|LAYER        event value (below); time order
//	d|X|CHANGESET(8)|TIME|TYPE|ID|VERSION|LAYER   empty; changeset index, the
//	                                      d|E| key is rebuilt from it
//	d|U|UID(8)                            8 bytes: unix seconds of the
//	                                      account's first version
//	d|W|NODE(8)|WAY(8)                    the node→way index of earlier
//	                                      versions; no longer written, and
//	                                      dropped by the next pass
//	d|meta|classify                       the Summary as JSON: rules hash,
//	                                      data fingerprint, counts
//
// A version yields at most one event per layer, so the keys are idempotent: a
// rerun rewrites the same keys. Run drops all of the above before a new pass.
//
// # Event value
//
// The value holds what the key does not, compactly:
//
//	flags     1 byte: bit 0 located, bit 1 distance present
//	geometry  1 byte: GeometryChange (0 when none)
//	changeset uvarint
//	uid       varint
//	class     uvarint length + bytes
//	distance  8 bytes IEEE 754 float64 metres, when flagged
//	position  2 × 4 bytes int32 lon, lat in 1e-7 degree, when located
//	keys      uvarint count, then per key: key and family (uvarint length +
//	          bytes each) and 1 byte change (KeyChange) | 0x80 when provenance
//
// A typical new_feature event takes about 30 bytes of value.
//
// # Locations
//
// A node is placed at its coordinates; a way at the centroid of the positions
// its nodes had at the version's timestamp; a relation at its first member that
// can be placed (a node, a way's centre, or a sub-relation's, at most
// maxRelationDepth levels deep, each relation entered once). Deleted ways and
// relations are placed as they stood a second before the deletion. Events that
// cannot be placed have Located false and are counted in Summary.Unlocated.
//
// # Node positions
//
// Placing a way needs the position each of its nodes had at the way version's
// time. The node scan delivers node versions sorted by id, then version, and
// the pass writes them in that order to a temporary file (Options.TempDir):
// 24 bytes per version, id, unix seconds, lon and lat. After the node scan the
// file is mapped read-only and its name removed; NodeAt is a binary search
// that gallops out from the previous answer (the nodes of a way mostly have
// nearby ids), then picks the last version not after the time, as the store's
// own NodeAt does. There is no per-node store lookup and no per-node memory:
// the kernel keeps the hot pages of the file cached like any other file.
// Tables of up to 256 MiB together (the node position and node→way tables of
// some 10 million versions) may stay resident whole; above that, every 256
// runs (below) the scan drops the tables' pages from the process's resident
// set (madvise MADV_DONTNEED; they stay in the page cache), so the resident
// set does not grow with the tables either, at the price of page faults in
// the searches. On systems without mmap the file is read into memory.
//
// # Concurrency
//
// One goroutine scans each type in key order, keeps the fingerprint, the
// first edits and the node position table, and hands runs of whole objects
// (consecutive ids, about 512 versions) to Options.Workers goroutines. Each
// worker has its own locator (caches of way and relation versions) and counts
// its own events; one writer goroutine stores the batches. A store that
// sorts in bulk (*ingest.Store's PutDerivedSorted) takes all of the pass's
// events at once: it sorts them in runs on disk and writes them in key order
// at the end of the pass, without the write-ahead log, memtables and
// compactions that writing some 2 keys per version in scan order costs; a
// Source without it gets one write batch per batch of events. A version is
// compared only with its own object's versions and placed from data that do
// not change during the pass, and the keys are fixed by the events, so the
// stored results are byte-identical whatever the number of workers.
//
// # Memory
//
// The pass holds, per worker, one batch of events (Options.BatchSize), the
// store's sort buffer for the events (32 MiB, the rest in temporary runs under
// Options.TempDir: about 110 bytes per event), a run of
// versions and a cache of at most 1024 way and 1024 relation version lists;
// a few runs queued between the scan and the workers; one sorting run of the
// node→way table while it is built (16 MiB); and the per-account first-edit
// times (one entry per account). None of it grows with the number of nodes,
// ways or relations; the two tables are files the kernel caches.
//
// Finding the ways an untagged vertex belonged to needs a node→way index. On
// the first vertex move the pass builds it as a second sorted table (16 bytes
// per distinct node and way pair) by an external sort: one scan over all way
// versions collects the pairs 16 MiB at a time (Options.nodeWayRun), sorts
// each run to a temporary file, and merges the runs, dropping repeats. A
// history's way node lists can be far larger than memory, and a snapshot
// (nothing moves) never pays for the table.
package layers
