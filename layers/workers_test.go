package layers

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"path/filepath"
	"reflect"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/rules"
	"github.com/paulmach/osm"
)

// TestWorkersMatchSerial classifies the same store in the scanning goroutine
// alone and with several workers taking small runs, and requires the derived
// areas (events, changeset index, first edits, node→way index, summary) to be
// byte-identical (the second also sorts the node→way table in many small
// runs). Stores: a real history with moved vertices and relations
// (osm module testdata relation_2714790.osm, so the node→way index is built
// while workers run) and a small simulated world (audit/sim, invented data).
func TestWorkersMatchSerial(t *testing.T) {
	for _, c := range []struct {
		name  string
		paths func(testing.TB) []string
	}{
		{"relation_2714790 history", func(tb testing.TB) []string {
			return []string{osmTestdata(tb, "annotate/testdata/relation_2714790.osm")}
		}},
		{"simulated world", simWorld},
	} {
		t.Run(c.name, func(t *testing.T) {
			ctx := context.Background()
			st := ingested(t, "", c.paths(t)...)
			serial, err := Run(ctx, st, rules.Default(), Options{Workers: 1})
			if err != nil {
				t.Fatal(err)
			}
			want := derivedDump(t, st)
			for _, o := range []Options{
				{Workers: 2},
				{Workers: 4, BatchSize: 7, chunk: 3, nodeWayRun: 5},
			} {
				o.Force = true
				got, err := Run(ctx, st, rules.Default(), o)
				if err != nil {
					t.Fatal(err)
				}
				if !reflect.DeepEqual(got, serial) {
					t.Errorf("%d workers: summary %+v, serial %+v", o.Workers, got, serial)
				}
				if d := derivedDump(t, st); !bytes.Equal(d, want) {
					t.Errorf("%d workers: derived area of %d bytes differs from the serial pass's %d bytes", o.Workers, len(d), len(want))
				}
			}
			if serial.Events["geometry"] == 0 || serial.Events["new_feature"] == 0 {
				t.Errorf("too few events to compare: %+v", serial.Events)
			}
		})
	}
}

// simWorld writes a small simulated world (4×3 districts, 10 months, a few
// thousand versions) and returns its history and changeset files.
func simWorld(tb testing.TB) []string {
	tb.Helper()
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months = 4, 3, 10
	cfg.Treated, cfg.Waves = 4, 2
	cfg.BaselinePOIs, cfg.BaselineBuildings, cfg.BaselineRoads = 8, 20, 4
	cfg.ImportBuildings, cfg.ImportPOIs = 200, 12
	dir := tb.TempDir()
	if _, err := sim.Generate(context.Background(), cfg, dir, false); err != nil {
		tb.Fatal(err)
	}
	return []string{filepath.Join(dir, sim.HistoryFile), filepath.Join(dir, sim.ChangesetsFile)}
}

// derivedDump returns every derived key and value under d| in key order.
func derivedDump(tb testing.TB, src DerivedReader) []byte {
	tb.Helper()
	var b bytes.Buffer
	err := src.ScanDerived(context.Background(), []byte("d|"), func(k, v []byte) error {
		fmt.Fprintf(&b, "%q=%q\n", k, v)
		return nil
	})
	if err != nil {
		tb.Fatal(err)
	}
	return b.Bytes()
}

// failingSource fails every ObjectVersions call, which the pass makes while
// placing ways and relations.
type failingSource struct {
	*memSource
	err error
}

func (f failingSource) ObjectVersions(context.Context, osm.Type, int64) ([]osm.Object, error) {
	return nil, f.err
}

// TestWorkerErrorStopsPass: a read error in one of several workers ends the
// pass with that error, records no summary and leaves no temporary file.
func TestWorkerErrorStopsPass(t *testing.T) {
	boom := errors.New("disk on fire")
	src := failingSource{newMemSource(t, readOSMXML(t, osmTestdata(t, "annotate/testdata/relation_2714790.osm"))...), boom}
	dir := t.TempDir()
	_, err := Run(context.Background(), src, rules.Default(), Options{Workers: 3, chunk: 1, TempDir: dir})
	if !errors.Is(err, boom) {
		t.Fatalf("Run = %v, want the source's error", err)
	}
	if _, err := Summarize(context.Background(), src); !errors.Is(err, ErrNotClassified) {
		t.Errorf("Summarize after a failed pass = %v, want ErrNotClassified", err)
	}
	if left, _ := filepath.Glob(filepath.Join(dir, "*")); len(left) != 0 {
		t.Errorf("files left behind: %q", left)
	}
}
