package retention

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"slices"
	"time"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
)

// ErrRetention is the sentinel under errors that make the retention study
// impossible.
var ErrRetention = errors.New("retention: cannot follow newcomers")

// NumHorizons is the number of horizons of Horizons.
const NumHorizons = 4

// Horizons returns the months after the first edit at which retention is
// read: 3, 6, 12 and 24.
func Horizons() [NumHorizons]int { return [NumHorizons]int{3, 6, 12, 24} }

// year is the index of the 12-month horizon.
const year = 2

// Newcomer is one account's start, as the estimators see it: no name, no id.
type Newcomer struct {
	Cohort  int  // index into the cohorts (treatment start months)
	Unit    int  // the unit of the first located edit (the cluster)
	Treated bool // the unit is an import area of this cohort (else a comparison area)
	After   bool // the first edit is at or after the cohort's start month
	// Months from the first edit to the last, or to the data end when
	// censored (not Stopped).
	Months  float64
	Stopped bool
	// Retained per Horizons: 1 when an edit falls at or after the first edit
	// plus that many calendar months, 0 when none does, -1 when the data end
	// before that day (not followed long enough).
	Retained [NumHorizons]int8
	// FirstYearEdits counts the account's edits in the 12 months from its
	// first edit; -1 when the data end before those 12 months do.
	FirstYearEdits int
}

// Options tunes Scan and Estimate. The zero value takes the defaults.
type Options struct {
	Before, After int // months around each cohort's start (default 24 each, as study.Options)
	// Gap is how many months without an edit before the data end count an
	// account as stopped (default 6): shorter pauses are common.
	Gap int
	// OtherImports are the changesets of every detected import: an account
	// whose first edit is in one is an import account, not a newcomer.
	OtherImports []osm.ChangesetID
	Draws        int    // cluster bootstrap draws (default 999)
	Seed         uint64 // of the bootstrap (default 1)
}

func (o Options) withDefaults() Options {
	if o.Before <= 0 {
		o.Before = 24
	}
	if o.After <= 0 {
		o.After = 24
	}
	if o.Gap <= 0 {
		o.Gap = 6
	}
	if o.Draws <= 0 {
		o.Draws = 999
	}
	if o.Seed == 0 {
		o.Seed = 1
	}
	return o
}

// account is an account's running state during the scan.
type account struct {
	unit      int  // -1: pending (no located edit in a unit yet); -2: not followed
	importer  bool // its first edit was an import's, or it is an import account
	first     time.Time
	last      time.Time
	firstYear int
}

// Sample is what Scan found: newcomers with their cohort, and the cohorts.
type Sample struct {
	Newcomers []Newcomer
	Cohorts   []string // YYYY-MM of each cohort's start
	// Treated lists each cohort's import areas and Controls the comparison
	// areas (unit indices), newcomers or not: the clusters the bootstrap
	// resamples.
	Treated  [][]int
	Controls []int
	DataEnd  time.Time // the store's last edit
	// Counts of accounts left out, for the notes.
	ImportAccounts int // first edit in an import changeset, or an import account
	Elsewhere      int // first located edit outside the treated and matched comparison units
}

// Scan finds the study's newcomers in the store: it reads every classified
// event once, in time order. st gives the treated units (with their start
// months) and matched controls of the same units as units.
func Scan(ctx context.Context, src layers.DerivedReader, st *study.Study, units study.UnitIndex, opts Options) (*Sample, error) {
	opts = opts.withDefaults()
	if st == nil || units == nil {
		return nil, fmt.Errorf("%w: no study", ErrRetention)
	}
	sc := newScanner(st, units, opts)
	if err := layers.ScanEvents(ctx, src, time.Time{}, time.Time{}, sc.add); err != nil {
		return nil, fmt.Errorf("retention: scan events: %w", err)
	}
	return sample(st, sc.accts, sc.end, opts)
}

// scanner follows every account through the events, in time order.
type scanner struct {
	units   study.UnitIndex
	skipCS  map[osm.ChangesetID]bool
	skipUID map[osm.UserID]bool
	accts   map[osm.UserID]*account
	end     time.Time
}

func newScanner(st *study.Study, units study.UnitIndex, opts Options) *scanner {
	sc := &scanner{units: units, skipCS: map[osm.ChangesetID]bool{}, skipUID: map[osm.UserID]bool{}, accts: map[osm.UserID]*account{}}
	for _, c := range st.Import.Changesets {
		sc.skipCS[c] = true
	}
	for _, c := range opts.OtherImports {
		sc.skipCS[c] = true
	}
	for _, u := range st.Import.UIDs {
		sc.skipUID[u] = true
	}
	return sc
}

// add takes the next event: the first event of an account decides whether
// it is followed (not an import's), its first located event its unit and
// start, every later event its last edit and first-year count.
func (sc *scanner) add(e *layers.Event) error {
	if e.Time.After(sc.end) {
		sc.end = e.Time
	}
	a, ok := sc.accts[e.UID]
	if !ok {
		a = &account{unit: -1}
		if sc.skipUID[e.UID] || sc.skipCS[e.Changeset] {
			a.unit, a.importer = -2, true
		}
		sc.accts[e.UID] = a
	}
	if a.unit == -2 {
		return nil
	}
	if a.unit == -1 {
		if !e.Located {
			return nil
		}
		u, ok := sc.units.Locate(e.Location)
		if !ok {
			a.unit = -2 // first located edit outside every unit
			return nil
		}
		a.unit, a.first = u, e.Time
	}
	a.last = e.Time
	if e.Time.Before(a.first.AddDate(1, 0, 0)) {
		a.firstYear++
	}
	return nil
}

// monthsBetween is the time from a to b in average calendar months.
func monthsBetween(a, b time.Time) float64 { return b.Sub(a).Hours() / 24 / (365.2425 / 12) }

func sample(st *study.Study, accts map[osm.UserID]*account, end time.Time, opts Options) (*Sample, error) {
	win0, err := time.Parse("2006-01", st.Window[0])
	if err != nil {
		return nil, fmt.Errorf("%w: study window %q: %v", ErrRetention, st.Window[0], err)
	}
	win1, err := time.Parse("2006-01", st.Window[1])
	if err != nil {
		return nil, fmt.Errorf("%w: study window %q: %v", ErrRetention, st.Window[1], err)
	}
	win1 = win1.AddDate(0, 1, 0)
	cohortOf := map[int]int{} // treated unit -> cohort index
	var cohorts []time.Time
	controls := map[int]bool{}
	for _, u := range st.Units {
		switch {
		case u.Status == study.StatusTreated && u.Weight > 0:
			m, err := time.Parse("2006-01", u.FirstMonth)
			if err != nil {
				return nil, fmt.Errorf("%w: unit %s first month %q: %v", ErrRetention, u.ID, u.FirstMonth, err)
			}
			k := -1
			for i, c := range cohorts {
				if c.Equal(m) {
					k = i
				}
			}
			if k < 0 {
				k = len(cohorts)
				cohorts = append(cohorts, m)
			}
			cohortOf[u.Index] = k
		case u.Status == study.StatusControl:
			controls[u.Index] = true
		}
	}
	if len(cohorts) == 0 || len(controls) == 0 {
		return nil, fmt.Errorf("%w: the study has no matched import and comparison areas", ErrRetention)
	}
	s := &Sample{DataEnd: end, Treated: make([][]int, len(cohorts))}
	for _, c := range cohorts {
		s.Cohorts = append(s.Cohorts, c.Format("2006-01"))
	}
	for _, u := range st.Units {
		if k, ok := cohortOf[u.Index]; ok {
			s.Treated[k] = append(s.Treated[k], u.Index)
		} else if controls[u.Index] {
			s.Controls = append(s.Controls, u.Index)
		}
	}
	for _, a := range accts {
		if a.importer {
			s.ImportAccounts++
		}
		if a.unit < 0 {
			continue
		}
		k, treated := cohortOf[a.unit]
		if !treated && !controls[a.unit] {
			s.Elsewhere++
			continue
		}
		for c, start := range cohorts {
			if treated && c != k {
				continue
			}
			lo, hi := start.AddDate(0, -opts.Before, 0), start.AddDate(0, opts.After, 0)
			if lo.Before(win0) {
				lo = win0
			}
			if hi.After(win1) {
				hi = win1
			}
			if a.first.Before(lo) || !a.first.Before(hi) {
				continue
			}
			s.Newcomers = append(s.Newcomers, newcomer(a, c, treated, !a.first.Before(start), end, opts.Gap))
		}
	}
	sortNewcomers(s.Newcomers)
	return s, nil
}

// sortNewcomers puts newcomers in a fixed order (the scan visits accounts in
// map order), so the bootstrap gives the same figures on every run.
func sortNewcomers(v []Newcomer) {
	b2i := func(b bool) int {
		if b {
			return 1
		}
		return 0
	}
	slices.SortFunc(v, func(a, b Newcomer) int {
		if c := cmp.Compare(a.Cohort, b.Cohort); c != 0 {
			return c
		}
		if c := cmp.Compare(a.Unit, b.Unit); c != 0 {
			return c
		}
		if c := cmp.Compare(b2i(a.After), b2i(b.After)); c != 0 {
			return c
		}
		if c := cmp.Compare(a.Months, b.Months); c != 0 {
			return c
		}
		if c := cmp.Compare(b2i(a.Stopped), b2i(b.Stopped)); c != 0 {
			return c
		}
		if c := cmp.Compare(a.FirstYearEdits, b.FirstYearEdits); c != 0 {
			return c
		}
		return slices.Compare(a.Retained[:], b.Retained[:])
	})
}

func newcomer(a *account, cohort int, treated, after bool, end time.Time, gap int) Newcomer {
	n := Newcomer{Cohort: cohort, Unit: a.unit, Treated: treated, After: after, FirstYearEdits: -1}
	if a.last.AddDate(0, gap, 0).Before(end) {
		n.Stopped, n.Months = true, monthsBetween(a.first, a.last)
	} else {
		n.Months = monthsBetween(a.first, end)
	}
	for i, h := range Horizons() {
		at := a.first.AddDate(0, h, 0)
		switch {
		case at.After(end):
			n.Retained[i] = -1
		case !a.last.Before(at):
			n.Retained[i] = 1
		}
	}
	if !a.first.AddDate(1, 0, 0).After(end) {
		n.FirstYearEdits = a.firstYear
	}
	return n
}
