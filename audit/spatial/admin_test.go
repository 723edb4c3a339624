package spatial

import (
	"compress/gzip"
	"context"
	"errors"
	"io"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/orb/geo"
	"github.com/paulmach/orb/geojson"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmpbf"
)

// fakeStore is a slice-backed VersionReader: versions per type and id in
// the order added (callers add them id and version ascending).
type fakeStore struct {
	objs map[osm.Type]map[int64][]osm.Object
	ids  map[osm.Type][]int64
}

func newFakeStore() *fakeStore {
	return &fakeStore{objs: map[osm.Type]map[int64][]osm.Object{}, ids: map[osm.Type][]int64{}}
}

func (s *fakeStore) add(o osm.Object) {
	t, id := o.ObjectID().Type(), o.ObjectID().Ref()
	if s.objs[t] == nil {
		s.objs[t] = map[int64][]osm.Object{}
	}
	if _, ok := s.objs[t][id]; !ok {
		s.ids[t] = append(s.ids[t], id)
	}
	s.objs[t][id] = append(s.objs[t][id], o)
}

func (s *fakeStore) ScanVersions(ctx context.Context, t osm.Type, fn func(osm.Object) error) error {
	ids := slices.Clone(s.ids[t])
	slices.Sort(ids)
	for _, id := range ids {
		for _, o := range s.objs[t][id] {
			if err := fn(o); err != nil {
				return err
			}
		}
	}
	return ctx.Err()
}

func (s *fakeStore) ObjectVersions(_ context.Context, t osm.Type, id int64) ([]osm.Object, error) {
	return s.objs[t][id], nil
}

// delawareStore loads testdata/delaware_boundaries.osm.pbf (real OSM data,
// see testdata/README.md) into a fakeStore.
func delawareStore(tb testing.TB) *fakeStore {
	tb.Helper()
	f, err := os.Open("testdata/delaware_boundaries.osm.pbf")
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	sc := osmpbf.New(context.Background(), f, 1)
	defer sc.Close()
	st := newFakeStore()
	for sc.Scan() {
		st.add(sc.Object())
	}
	if err := sc.Err(); err != nil {
		tb.Fatal(err)
	}
	return st
}

// osmiumFigures reads the polygons osmium-tool 1.15.0 built from the same
// fixture (testdata/osmium_export_delaware_boundaries.geojson.gz, command
// in testdata/README.md), by relation id.
func osmiumFigures(tb testing.TB) map[string]orb.MultiPolygon {
	tb.Helper()
	f, err := os.Open("testdata/osmium_export_delaware_boundaries.geojson.gz")
	if err != nil {
		tb.Fatal(err)
	}
	defer f.Close()
	zr, err := gzip.NewReader(f)
	if err != nil {
		tb.Fatal(err)
	}
	data, err := io.ReadAll(zr)
	if err != nil {
		tb.Fatal(err)
	}
	fc, err := geojson.UnmarshalFeatureCollection(data)
	if err != nil {
		tb.Fatal(err)
	}
	out := map[string]orb.MultiPolygon{}
	for _, ft := range fc.Features {
		v, ok := ft.Properties["@id"].(float64)
		if !ok {
			tb.Fatalf("osmium feature without @id: %v", ft.Properties)
		}
		id := "r" + strconv.FormatInt(int64(v), 10)
		switch g := ft.Geometry.(type) {
		case orb.Polygon:
			out[id] = orb.MultiPolygon{g}
		case orb.MultiPolygon:
			out[id] = g
		}
	}
	return out
}

// shape is what the comparison with osmium checks per relation.
type shape struct {
	polygons, rings, positions int
	area                       float64
	bound                      orb.Bound
}

func shapeOf(mp orb.MultiPolygon) shape {
	s := shape{polygons: len(mp), area: geo.Area(mp), bound: mp.Bound()}
	for _, p := range mp {
		s.rings += len(p)
		for _, r := range p {
			s.positions += len(r)
		}
	}
	return s
}

// TestAdminUnitsAgainstOsmium assembles the Delaware boundary relations of
// the fixture and compares every polygon with osmium-tool 1.15.0's
// `osmium export` of the same file: the same relations built, the same
// number of polygons, rings and positions, the same bound, and the same
// area (both measured with orb/geo.Area, so that the check is on the
// assembly). Dorchester County (relation 935143) has 3 of its member ways
// in the extract; osmium builds nothing for it, and AdminUnits must name it.
func TestAdminUnitsAgainstOsmium(t *testing.T) {
	ctx := context.Background()
	st := delawareStore(t)
	want := osmiumFigures(t)
	if len(want) != 11 {
		t.Fatalf("osmium export holds %d relations, want 11", len(want))
	}
	for _, tc := range []struct {
		name  string
		spec  string
		ids   []string // unit ids expected, in id order
		fails []osm.RelationID
	}{
		{"counties with one incomplete", "admin:6", nil, []osm.RelationID{935143}},
		{"counties by name", "admin:6,name=*county", nil, []osm.RelationID{935143}},
		{"delaware counties", "admin:6,name=[KNS]*", []string{"r1245077", "r1245078", "r1245079"}, nil},
		{"towns", "admin:8", []string{"r117175", "r117178", "r117179", "r133626", "r6291544", "r6291545", "r6292526", "r6292527"}, nil},
		// Which towns lie in Kent County, Delaware: from memory (US Census
		// places); Smyrna straddles the New Castle line with most of it in
		// Kent. Marydel (relation 133626) is the Maryland town across the
		// state line (its tags: tiger:STATEFP=24, is_in:state=Maryland).
		{"towns within Kent County", "admin:8,within=Kent County",
			[]string{"r117175", "r117178", "r117179", "r6291544", "r6291545", "r6292526", "r6292527"}, nil},
		{"towns within Kent County by id", "admin:8,within=r1245078,name=[DF]*", []string{"r117178", "r117179", "r6292526"}, nil},
		{"one town", "admin:8,name=dover", []string{"r117178"}, nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			a, ok, err := ParseAdminSpec(tc.spec)
			if !ok || err != nil {
				t.Fatalf("ParseAdminSpec: %v %v", ok, err)
			}
			u, err := AdminUnits(ctx, st, a, time.Time{})
			if tc.fails != nil {
				var ae *AssemblyError
				if !errors.As(err, &ae) || !errors.Is(err, ErrUnits) {
					t.Fatalf("got %v, want an AssemblyError", err)
				}
				var got []osm.RelationID
				for _, f := range ae.Failures {
					got = append(got, f.ID)
				}
				if !slices.Equal(got, tc.fails) || !strings.Contains(err.Error(), "Dorchester County") || !strings.Contains(err.Error(), "missing") {
					t.Fatalf("failures %v, want %v:\n%v", got, tc.fails, err)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			var ids []string
			for i := range u.Len() {
				ids = append(ids, u.ID(i))
			}
			if !slices.Equal(ids, tc.ids) {
				t.Fatalf("units %v, want %v", ids, tc.ids)
			}
			for i := range u.Len() {
				// Positions agree to OSM's 1e-7 degree precision (the PBF
				// decoder and osmium round differently in the last bits).
				got, ref := shapeOf(u.Geometry(i).(orb.MultiPolygon)), shapeOf(want[u.ID(i)])
				near := func(a, b orb.Point) bool { return math.Abs(a[0]-b[0]) < 1e-7 && math.Abs(a[1]-b[1]) < 1e-7 }
				if got.polygons != ref.polygons || got.rings != ref.rings || got.positions != ref.positions ||
					!near(got.bound.Min, ref.bound.Min) || !near(got.bound.Max, ref.bound.Max) ||
					math.Abs(got.area-ref.area) > 1e-8*ref.area {
					t.Errorf("%s (%s): got %+v, osmium %+v", u.ID(i), u.Name(i), got, ref)
				}
				if u.Name(i) == "" {
					t.Errorf("%s has no name", u.ID(i))
				}
			}
		})
	}
}

// TestAdminUnitsAsOf checks the choice of versions by time on the real
// fixture with one version added: Kent County (relation 1245078) deleted
// a day after its stored version. Before the deletion it is a unit; at the
// latest state it is not.
func TestAdminUnitsAsOf(t *testing.T) {
	ctx := context.Background()
	st := delawareStore(t)
	kent := st.objs[osm.TypeRelation][1245078][0].(*osm.Relation)
	del := *kent
	del.Version++
	del.Visible = false
	del.Timestamp = kent.Timestamp.Add(24 * time.Hour)
	del.Members = nil
	st.add(&del)
	spec := AdminSpec{Level: "6", Name: "[KNS]*"}
	for _, tc := range []struct {
		name string
		at   time.Time
		want int
		warn bool
	}{
		{"before the deletion", kent.Timestamp.Add(time.Hour), 3, true},
		{"latest", time.Time{}, 2, false},
		{"after the deletion", del.Timestamp.Add(time.Hour), 2, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			u, err := AdminUnits(ctx, st, spec, tc.at)
			if err != nil {
				t.Fatal(err)
			}
			if u.Len() != tc.want {
				t.Fatalf("%d units, want %d", u.Len(), tc.want)
			}
			// A snapshot holds one version per object: a time before some
			// of them (the other counties were edited after Kent) falls
			// back to the earliest, with a warning.
			if got := len(u.Warnings()) > 0; got != tc.warn {
				t.Errorf("warnings %v, want some: %v", u.Warnings(), tc.warn)
			}
		})
	}
}

func TestParseAdminSpec(t *testing.T) {
	for _, tc := range []struct {
		name, spec string
		want       AdminSpec
		ok, bad    bool
	}{
		{"level", "admin:8", AdminSpec{Level: "8"}, true, false},
		{"filters", "admin:8,name=D*,within=r12", AdminSpec{Level: "8", Name: "D*", Within: "r12"}, true, false},
		{"not admin", "tiles:12", AdminSpec{}, false, false},
		{"level zero", "admin:0", AdminSpec{}, true, true},
		{"level text", "admin:county", AdminSpec{}, true, true},
		{"unknown filter", "admin:8,near=x", AdminSpec{}, true, true},
		{"bad glob", "admin:8,name=[", AdminSpec{}, true, true},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got, ok, err := ParseAdminSpec(tc.spec)
			if ok != tc.ok || (err != nil) != tc.bad {
				t.Fatalf("ok %v err %v", ok, err)
			}
			if err == nil && got != tc.want {
				t.Fatalf("got %+v, want %+v", got, tc.want)
			}
			if err != nil && !errors.Is(err, ErrUnits) {
				t.Fatalf("%v does not wrap ErrUnits", err)
			}
		})
	}
	if _, err := Build(context.Background(), "admin:8", Options{}); !errors.Is(err, ErrUnits) {
		t.Fatalf("admin:8 without a store: %v", err)
	}
}

// BenchmarkAdminUnits assembles the eight towns of the Delaware fixture
// (real data, testdata/README.md) from a slice-backed store.
func BenchmarkAdminUnits(b *testing.B) {
	st := delawareStore(b)
	ctx := context.Background()
	positions := 0
	b.ReportAllocs()
	for b.Loop() {
		u, err := AdminUnits(ctx, st, AdminSpec{Level: "8"}, time.Time{})
		if err != nil {
			b.Fatal(err)
		}
		positions = 0
		for i := range u.Len() {
			positions += shapeOf(u.Geometry(i).(orb.MultiPolygon)).positions
		}
	}
	b.ReportMetric(float64(positions)*float64(b.N)/b.Elapsed().Seconds(), "positions/s")
}
