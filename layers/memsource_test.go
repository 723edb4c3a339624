package layers

import (
	"bytes"
	"context"
	"sort"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"
)

// memSource is an in-memory Source for tests: versions per type sorted by id
// and version, and a derived area kept as a map.
type memSource struct {
	objs    map[osm.Type][]osm.Object
	mu      sync.Mutex // guards derived and puts: the pass writes from another goroutine
	derived map[string][]byte
	puts    int // PutDerived calls
}

var _ Source = (*memSource)(nil)

func newMemSource(tb testing.TB, objs ...osm.Object) *memSource {
	tb.Helper()
	m := &memSource{objs: make(map[osm.Type][]osm.Object), derived: make(map[string][]byte)}
	for _, o := range objs {
		t := o.ObjectID().Type()
		m.objs[t] = append(m.objs[t], o)
	}
	for _, vs := range m.objs {
		sort.SliceStable(vs, func(i, j int) bool {
			a, b := vs[i].ObjectID(), vs[j].ObjectID()
			if a.Ref() != b.Ref() {
				return a.Ref() < b.Ref()
			}
			return a.Version() < b.Version()
		})
	}
	return m
}

func (m *memSource) ScanVersions(ctx context.Context, t osm.Type, fn func(o osm.Object) error) error {
	for _, o := range m.objs[t] {
		if err := ctx.Err(); err != nil {
			return err
		}
		if err := fn(o); err != nil {
			return err
		}
	}
	return nil
}

func (m *memSource) ObjectVersions(_ context.Context, t osm.Type, id int64) ([]osm.Object, error) {
	var out []osm.Object
	for _, o := range m.objs[t] {
		if o.ObjectID().Ref() == id {
			out = append(out, o)
		}
	}
	return out, nil
}

func (m *memSource) NodeAt(_ context.Context, id osm.NodeID, at time.Time) (orb.Point, bool, error) {
	var last *osm.Node
	for _, o := range m.objs[osm.TypeNode] {
		n := o.(*osm.Node)
		if n.ID == id && !n.Timestamp.After(at) {
			last = n
		}
	}
	if last == nil || !last.Visible {
		return orb.Point{}, false, nil
	}
	return last.Point(), true, nil
}

func (m *memSource) PutDerived(_ context.Context, fill func(put func(key, value []byte) error) error) error {
	m.mu.Lock()
	m.puts++
	m.mu.Unlock()
	return fill(func(k, v []byte) error {
		m.mu.Lock()
		defer m.mu.Unlock()
		m.derived[string(k)] = bytes.Clone(v)
		return nil
	})
}

func (m *memSource) keys(prefix []byte) []string {
	m.mu.Lock()
	defer m.mu.Unlock()
	var ks []string
	for k := range m.derived {
		if strings.HasPrefix(k, string(prefix)) {
			ks = append(ks, k)
		}
	}
	sort.Strings(ks)
	return ks
}

func (m *memSource) ScanDerived(ctx context.Context, prefix []byte, fn func(key, value []byte) error) error {
	for _, k := range m.keys(prefix) {
		if err := ctx.Err(); err != nil {
			return err
		}
		m.mu.Lock()
		v, ok := m.derived[k]
		m.mu.Unlock()
		if !ok {
			continue
		}
		if err := fn([]byte(k), v); err != nil {
			return err
		}
	}
	return nil
}

func (m *memSource) GetDerived(_ context.Context, key []byte) ([]byte, bool, error) {
	m.mu.Lock()
	defer m.mu.Unlock()
	v, ok := m.derived[string(key)]
	return v, ok, nil
}

func (m *memSource) DropDerived(_ context.Context, prefix []byte) error {
	for _, k := range m.keys(prefix) {
		m.mu.Lock()
		delete(m.derived, k)
		m.mu.Unlock()
	}
	return nil
}
