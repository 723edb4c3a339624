// Package codec is the history store's key layout and value encoding: the
// keys of object versions, changesets and metadata, and the compact binary
// values of versions and changeset records, with their decoders. Package
// ingest's doc.go documents the layout; both of ingest's write paths and its
// reads go through here, so the format lives in one place.
package codec
