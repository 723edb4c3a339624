package retention

import (
	"math"
	"testing"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
)

// bands are four units, one per degree of longitude from 0 to 4.
type bands struct{}

func (bands) Len() int        { return 4 }
func (bands) ID(i int) string { return string(rune('a' + i)) }
func (bands) Locate(p orb.Point) (int, bool) {
	if p[0] < 0 || p[0] >= 4 {
		return 0, false
	}
	return int(p[0]), true
}

func day(s string) time.Time {
	t, err := time.Parse("2006-01-02", s)
	if err != nil {
		panic(err)
	}
	return t
}

// TestScanRules checks who counts as a newcomer, where and when, on
// hand-made events: the unit of the first located edit decides, once; an
// account whose first located edit is outside every unit is not counted,
// whatever it does later; import accounts and accounts starting in an
// import's changeset are left out; unfollowed horizons are unknown.
func TestScanRules(t *testing.T) {
	st := &study.Study{
		Import: study.ImportRef{Changesets: []osm.ChangesetID{100}, UIDs: []osm.UserID{9}},
		Window: [2]string{"2019-01", "2021-12"},
		Units: []study.UnitInfo{
			{Index: 0, ID: "a", Status: study.StatusTreated, FirstMonth: "2020-01", Weight: 1},
			{Index: 1, ID: "b", Status: study.StatusControl, Weight: 1},
			{Index: 2, ID: "c", Status: study.StatusExcluded},
			{Index: 3, ID: "d", Status: study.StatusCandidate},
		},
	}
	at := func(uid int, when string, lon float64, located bool, cs int) *layers.Event {
		return &layers.Event{UID: osm.UserID(uid), Time: day(when), Location: orb.Point{lon, 0}, Located: located, Changeset: osm.ChangesetID(cs)}
	}
	events := []*layers.Event{
		at(1, "2019-06-10", 0, false, 1),    // no position: not yet placed
		at(1, "2019-07-01", 0.5, true, 2),   // first located: unit a, before the import
		at(4, "2019-08-01", 0.5, true, 100), // first edit in the import's changeset
		at(9, "2019-09-01", 0.5, true, 3),   // the import's account
		at(3, "2020-02-01", 7, true, 4),     // first located edit outside every unit
		at(3, "2020-02-02", 0.5, true, 5),
		at(2, "2020-03-05", 1.5, true, 6), // unit b, after the import's start
		at(2, "2020-04-01", 0.5, true, 7), // later edits elsewhere do not move it
		at(5, "2020-05-01", 2.5, true, 8), // an excluded unit
		at(1, "2020-08-01", 1.5, true, 9),
		at(6, "2021-11-01", 0.5, true, 10), // too late to be followed a season
		at(7, "2021-12-31", 3.5, true, 11), // an unmatched unit; the data end
	}
	sc := newScanner(st, bands{}, Options{})
	for _, e := range events {
		if err := sc.add(e); err != nil {
			t.Fatal(err)
		}
	}
	s, err := sample(st, sc.accts, sc.end, Options{}.withDefaults())
	if err != nil {
		t.Fatal(err)
	}
	if s.ImportAccounts != 2 || s.Elsewhere != 2 || len(s.Newcomers) != 3 {
		t.Fatalf("import accounts %d (want 2), elsewhere %d (want 2), newcomers %d (want 3): %+v", s.ImportAccounts, s.Elsewhere, len(s.Newcomers), s.Newcomers)
	}
	months := func(a, b string) float64 { return day(b).Sub(day(a)).Hours() / 24 / (365.2425 / 12) }
	want := []Newcomer{
		// uid 1: unit a from 2019-07-01, last edit 2020-08-01 (stopped: over 6 months before the end).
		{Cohort: 0, Unit: 0, Treated: true, After: false, Months: months("2019-07-01", "2020-08-01"), Stopped: true,
			Retained: [NumHorizons]int8{1, 1, 1, 0}, FirstYearEdits: 1},
		// uid 6: unit a, followed two months: censored, nothing known yet.
		{Cohort: 0, Unit: 0, Treated: true, After: true, Months: months("2021-11-01", "2021-12-31"), Stopped: false,
			Retained: [NumHorizons]int8{-1, -1, -1, -1}, FirstYearEdits: -1},
		// uid 2: unit b from 2020-03-05, last 2020-04-01; 24 months on lies past the data end.
		{Cohort: 0, Unit: 1, Treated: false, After: true, Months: months("2020-03-05", "2020-04-01"), Stopped: true,
			Retained: [NumHorizons]int8{0, 0, 0, -1}, FirstYearEdits: 2},
	}
	for i, w := range want {
		g := s.Newcomers[i]
		if math.Abs(g.Months-w.Months) > 1e-9 {
			t.Errorf("newcomer %d: %.4f months, want %.4f", i, g.Months, w.Months)
		}
		g.Months = w.Months
		if g != w {
			t.Errorf("newcomer %d:\n got %+v\nwant %+v", i, g, w)
		}
	}
	if got := s.Treated; len(got) != 1 || len(got[0]) != 1 || got[0][0] != 0 || len(s.Controls) != 1 || s.Controls[0] != 1 {
		t.Errorf("clusters: treated %v, controls %v", s.Treated, s.Controls)
	}
}
