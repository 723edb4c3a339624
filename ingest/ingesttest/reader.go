// Package ingesttest provides a slice-backed osmfile.Reader for tests.
package ingesttest

import (
	"github.com/loadwake/loadwake/ingest/osmfile"
)

// Reader yields a fixed slice of items, then Err, as an osmfile.Reader over a
// file would. The zero value is an empty reader.
type Reader struct {
	Items []osmfile.Item
	// Fail, when non-nil, is returned by Err after the items are exhausted, as a
	// reader that hit malformed input would.
	Fail error
	// Kind is what Format reports.
	Kind osmfile.Format
	// Size is the total BytesRead reports once every item is read; BytesRead
	// grows in proportion to the items read.
	Size int64

	next   int
	cur    osmfile.Item
	closed bool
}

var _ osmfile.Reader = (*Reader)(nil)

// New returns a Reader over items.
func New(format osmfile.Format, items ...osmfile.Item) *Reader {
	return &Reader{Items: items, Kind: format}
}

// Scan advances to the next item.
func (r *Reader) Scan() bool {
	if r.closed || r.next >= len(r.Items) {
		return false
	}
	r.cur = r.Items[r.next]
	r.next++
	return true
}

// Item returns the current item.
func (r *Reader) Item() osmfile.Item { return r.cur }

// Err returns Fail once the items are exhausted.
func (r *Reader) Err() error {
	if r.next >= len(r.Items) {
		return r.Fail
	}
	return nil
}

// Close stops the reader.
func (r *Reader) Close() error { r.closed = true; return nil }

// Closed reports whether Close was called.
func (r *Reader) Closed() bool { return r.closed }

// Format returns Kind.
func (r *Reader) Format() osmfile.Format { return r.Kind }

// BytesRead returns the share of Size matching the items read.
func (r *Reader) BytesRead() int64 {
	if len(r.Items) == 0 {
		return r.Size
	}
	return r.Size * int64(r.next) / int64(len(r.Items))
}
