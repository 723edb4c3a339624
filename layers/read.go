package layers

import (
	"bytes"
	"context"
	"encoding/binary"
	"encoding/json"
	"errors"
	"fmt"
	"time"

	"github.com/paulmach/osm"
)

// DerivedReader is the read side of the store's derived area, all the event
// readers need; Source and *ingest.Store meet it.
type DerivedReader interface {
	ScanDerived(ctx context.Context, prefix []byte, fn func(key, value []byte) error) error
	GetDerived(ctx context.Context, key []byte) ([]byte, bool, error)
}

// errStop ends a derived scan early; it never leaves this package.
var errStop = errors.New("layers: stop scan")

// ScanEvents calls fn for every stored event with from <= Time < to, in time
// order (ties by object type, id, version and layer). A zero from or to leaves
// that end open. fn owns the event and may keep it; an error from fn stops the
// scan and is returned.
func ScanEvents(ctx context.Context, src DerivedReader, from, to time.Time, fn func(*Event) error) error {
	var lo, hi [8]byte
	loOpen, hiOpen := from.IsZero(), to.IsZero()
	binary.BigEndian.PutUint64(lo[:], timeKey(from))
	binary.BigEndian.PutUint64(hi[:], timeKey(to))
	if loOpen {
		lo = [8]byte{}
	}
	if hiOpen {
		hi = [8]byte{0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff, 0xff}
	}
	// Scan only the longest key prefix both ends share.
	n := 0
	for n < 8 && lo[n] == hi[n] {
		n++
	}
	prefix := append(append([]byte(nil), prefixEvent...), lo[:n]...)
	err := src.ScanDerived(ctx, prefix, func(k, v []byte) error {
		if len(k) < len(prefixEvent)+8 {
			return fmt.Errorf("%w: event key of %d bytes", ErrCorrupt, len(k))
		}
		tk := k[len(prefixEvent) : len(prefixEvent)+8]
		if bytes.Compare(tk, lo[:]) < 0 {
			return nil
		}
		if !hiOpen && bytes.Compare(tk, hi[:]) >= 0 {
			return errStop
		}
		e := new(Event)
		if err := decodeEvent(k, v, e); err != nil {
			return err
		}
		return fn(e)
	})
	if errors.Is(err, errStop) {
		return nil
	}
	return err
}

// ScanChangesetEvents calls fn for every event changeset id made, in time
// order. fn owns the event and may keep it.
func ScanChangesetEvents(ctx context.Context, src DerivedReader, id osm.ChangesetID, fn func(*Event) error) error {
	prefix := binary.BigEndian.AppendUint64(append([]byte(nil), prefixChangeset...), uint64(id))
	var keys [][]byte
	err := src.ScanDerived(ctx, prefix, func(k, _ []byte) error {
		ek, err := eventKeyFromChangesetKey(k)
		if err != nil {
			return err
		}
		keys = append(keys, ek)
		return nil
	})
	if err != nil {
		return fmt.Errorf("events of changeset %d: %w", id, err)
	}
	for _, k := range keys {
		v, ok, err := src.GetDerived(ctx, k)
		if err != nil {
			return fmt.Errorf("events of changeset %d: %w", id, err)
		}
		if !ok {
			return fmt.Errorf("%w: changeset %d index points at a missing event", ErrCorrupt, id)
		}
		e := new(Event)
		if err := decodeEvent(k, v, e); err != nil {
			return err
		}
		if err := fn(e); err != nil {
			return err
		}
	}
	return nil
}

// FirstEdits returns, for every account with a stored version, the time of its
// first version, as recorded by the last classification pass. It tells
// newcomers from established mappers.
func FirstEdits(ctx context.Context, src DerivedReader) (map[osm.UserID]time.Time, error) {
	out := make(map[osm.UserID]time.Time)
	err := src.ScanDerived(ctx, prefixFirstEdit, func(k, v []byte) error {
		if len(k) != len(prefixFirstEdit)+8 || len(v) != 8 {
			return fmt.Errorf("%w: first-edit record of %d+%d bytes", ErrCorrupt, len(k), len(v))
		}
		uid := osm.UserID(int64(binary.BigEndian.Uint64(k[len(prefixFirstEdit):])))
		out[uid] = time.Unix(int64(binary.BigEndian.Uint64(v)), 0).UTC()
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("first edits: %w", err)
	}
	return out, nil
}

// Summarize returns the summary of the last completed classification pass,
// or ErrNotClassified when there is none.
func Summarize(ctx context.Context, src DerivedReader) (Summary, error) {
	v, ok, err := src.GetDerived(ctx, keyMeta)
	if err != nil {
		return Summary{}, fmt.Errorf("classification summary: %w", err)
	}
	if !ok {
		return Summary{}, ErrNotClassified
	}
	var s Summary
	if err := json.Unmarshal(v, &s); err != nil {
		return Summary{}, fmt.Errorf("%w: classification summary: %v", ErrCorrupt, err)
	}
	return s, nil
}
