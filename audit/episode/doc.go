// Package episode finds past imports in an edit history: it matches
// changesets against the import rules of a rules.RuleSet (changeset tags such
// as import=yes, dedicated import accounts, large creation-only changesets),
// counts what each changeset created, modified and deleted, and groups the
// matched changesets into episodes by account and source while they follow
// each other within the grouping gap. A user may instead name an import by
// its changesets or account.
//
// Episodes are candidates to check against an import's documentation, not
// findings about people (Caution). The history is read through Source, which
// *ingest.Store meets.
//
// # Stored counters
//
// Detect's version scan counts at most 32768 changesets in memory, then writes
// their partial counters into the store's derived area (Derived, which
// *ingest.Store meets; a Source without it gets an in-memory area), so its
// memory does not grow with the number of changesets. Keys, integers
// big-endian:
//
//	d|I|s|CHANGESET(8, sign bit flipped)|SPILL(4)   partial counters: creates,
//	                      modifies, deletes (uvarint), first and last unix
//	                      seconds, uid (varint), user (uvarint length + bytes),
//	                      flag byte (bit 0: node bound follows), bound as four
//	                      float64 (min lon, min lat, max lon, max lat), class
//	                      count, then per class name (length + bytes) and count
//	d|I|meta              JSON: rules hash and the fingerprint of the versions
//	                      counted (versions per type, highest changeset id)
//
// The partials of a changeset are adjacent and added up on reading; the
// account is the earliest spill's (the changeset's first version scanned).
// A later Detect with the same rules reuses the counters, reading no
// versions, while the store's classification summary (layers.Summarize) has
// the fingerprint they were counted from: after new data are ingested and
// classified, they are counted again. New data ingested but not yet
// classified are not seen until the next classification, as for the events.
package episode
