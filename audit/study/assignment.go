package study

import (
	"context"
	"errors"
	"fmt"
	"slices"
	"time"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/layers"
)

// Assignment is a treatment given as data instead of found by import
// detection: which units a dated event reached and from which month. Any
// intervention on areas fits (an import, a new imagery release, a mapping
// party series, a local chapter's founding, a rollout plan's waves);
// BuildAssigned builds the same study from it that Build builds from an
// import's changesets. Treatment never switches off: a unit stays treated
// from its Start to the end of the panel (the staggered estimators assume so).
type Assignment struct {
	// Event names the event in the reports' words, e.g. "mapping party
	// series"; reports never assume it is an import.
	Event string
	// Source says where the assignment came from (a file name), for
	// messages and provenance.
	Source string
	// Starts holds one row per treated unit, unit ids unique.
	Starts []Start
	// First and Last bound the event as a whole: the panel runs from
	// Options.Before months before First's month to Options.After months
	// after Last's month, and the matching traits come from before First.
	// Zero values take the earliest and the latest Start.
	First, Last time.Time
	// Changesets and UIDs, when known, are the event's own edits and
	// accounts: left out of the outcomes as an import's are (UIDs unless
	// Options.KeepImportAccounts). Both may be empty.
	Changesets []osm.ChangesetID
	UIDs       []osm.UserID
}

// Start is one treated unit of an Assignment.
type Start struct {
	Unit  string    // unit id, as the study's units name it
	Month time.Time // first treated month (its first day, UTC)
	Pos   string    // where it was given, e.g. "waves.csv:4", for messages
}

// ErrAssignment is the sentinel under errors about an unusable treatment
// assignment or treatment file.
var ErrAssignment = errors.New("study: bad treatment assignment")

// Span returns the months the event spans: First and Last when set, else the
// earliest and the latest Start, each as the first day of its month.
func (a *Assignment) Span() (first, last time.Time) {
	for _, s := range a.Starts {
		m := monthOf(s.Month)
		if first.IsZero() || m.Before(first) {
			first = m
		}
		if m.After(last) {
			last = m
		}
	}
	if !a.First.IsZero() {
		first = a.First
	}
	if !a.Last.IsZero() {
		last = a.Last
	}
	return first, last
}

// Validate checks that the assignment names at least one treated unit, each
// once, with a month, and that First is not after Last.
func (a *Assignment) Validate() error {
	if len(a.Starts) == 0 {
		return fmt.Errorf("%w: %s names no treated unit", ErrAssignment, orName(a.Source, "the assignment"))
	}
	seen := make(map[string]string, len(a.Starts))
	for _, s := range a.Starts {
		at := orName(s.Pos, orName(a.Source, "the assignment"))
		switch {
		case s.Unit == "":
			return fmt.Errorf("%w: %s: empty unit id", ErrAssignment, at)
		case s.Month.IsZero():
			return fmt.Errorf("%w: %s: unit %q has no first treated month", ErrAssignment, at, s.Unit)
		}
		if prev, ok := seen[s.Unit]; ok {
			return fmt.Errorf("%w: %s: unit %q is listed twice (first at %s); give each unit one first treated month", ErrAssignment, at, s.Unit, prev)
		}
		seen[s.Unit] = at
	}
	first, last := a.Span()
	if first.After(last) {
		return fmt.Errorf("%w: %s: the event's first month %s is after its last month %s", ErrAssignment, orName(a.Source, "the assignment"),
			first.Format("2006-01"), last.Format("2006-01"))
	}
	return nil
}

// ref is the ImportRef the builder follows for the assignment.
func (a *Assignment) ref() ImportRef {
	first, last := a.Span()
	return ImportRef{ID: a.Event, Changesets: slices.Clone(a.Changesets), UIDs: slices.Clone(a.UIDs), First: first, Last: last}
}

func orName(s, none string) string {
	if s == "" {
		return none
	}
	return s
}

// BuildAssigned builds the study of an assignment over the given units: the
// same panel, exclusions, matching and notes as Build, with each listed unit
// treated from its Start month instead of from an import's first edit
// there. Units of opts.OtherImports inside the window are excluded from the
// controls as in Build; the assignment's own Changesets (and UIDs unless
// KeepImportAccounts) are left out of the outcomes. A listed unit that is
// not among units is an error naming where it was listed.
func BuildAssigned(ctx context.Context, src layers.DerivedReader, a *Assignment, units UnitIndex, opts Options) (*Study, error) {
	opts = opts.WithDefaults()
	if units == nil || units.Len() == 0 {
		return nil, fmt.Errorf("%w: no spatial units", ErrStudy)
	}
	if err := a.Validate(); err != nil {
		return nil, err
	}
	index := make(map[string]int, units.Len())
	for i := range units.Len() {
		index[units.ID(i)] = i
	}
	assigned := make(map[int]time.Time, len(a.Starts))
	for _, s := range a.Starts {
		u, ok := index[s.Unit]
		if !ok {
			return nil, fmt.Errorf("%w: %s: unit %q is not among the study's %d units (check --unit-id and the ids in both files)",
				ErrAssignment, orName(s.Pos, orName(a.Source, "the assignment")), s.Unit, units.Len())
		}
		assigned[u] = monthOf(s.Month)
	}
	st, err := build(ctx, src, a.ref(), units, opts, assigned)
	if err != nil {
		return nil, err
	}
	st.Assignment = a
	return st, nil
}
