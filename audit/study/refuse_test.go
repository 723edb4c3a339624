package study

import (
	"context"
	"encoding/json"
	"errors"
	"testing"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// summaryStore is a derived area holding only a classification summary
// (or nothing): enough for the checks that run before any event is read.
type summaryStore struct{ summary []byte }

func (s summaryStore) ScanDerived(context.Context, []byte, func(key, value []byte) error) error {
	return nil
}

func (s summaryStore) GetDerived(context.Context, []byte) ([]byte, bool, error) {
	return s.summary, s.summary != nil, nil
}

// oneUnit is a unit index of one unit.
type oneUnit struct{}

func (oneUnit) Len() int                     { return 1 }
func (oneUnit) ID(int) string                { return "u0" }
func (oneUnit) Locate(orb.Point) (int, bool) { return 0, true }

// TestBuildRefusesUnusableStores: an unclassified store and a snapshot
// (classified edits that are all first versions) stop with an error naming
// the problem and what to do, before any counting.
func TestBuildRefusesUnusableStores(t *testing.T) {
	summary := func(events map[string]int64) []byte {
		b, err := json.Marshal(map[string]any{"events": events})
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	ref := ImportRef{ID: "imp-1", Changesets: []osm.ChangesetID{1}, First: time.Date(2030, 5, 1, 0, 0, 0, 0, time.UTC)}
	for _, c := range []struct {
		name  string
		store summaryStore
		want  error
	}{
		{"unclassified", summaryStore{}, ErrUnclassified},
		{"snapshot", summaryStore{summary(map[string]int64{"new_feature": 5120, "bookkeeping": 3})}, ErrSnapshot},
	} {
		t.Run(c.name, func(t *testing.T) {
			_, err := Build(context.Background(), c.store, ref, oneUnit{}, Options{})
			if !errors.Is(err, c.want) || !errors.Is(err, ErrStudy) {
				t.Fatalf("error %v, want %v", err, c.want)
			}
		})
	}
}
