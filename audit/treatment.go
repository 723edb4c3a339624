package audit

import (
	"context"
	"fmt"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/study"
)

// Kinds of EventSummary: where a study's treatment came from.
const (
	EventImport = "import" // a detected or named import (Run)
	EventFile   = "file"   // a treatment assignment given as data (RunTreatment)
)

// EventSummary is the "event" object of the audit JSON: what the treatment
// is and where it came from. Reports word their text by Kind: an import's
// report speaks of the import, an assignment's of its Name, never of an
// import.
type EventSummary struct {
	Kind       string `json:"kind"`             // EventImport or EventFile
	Name       string `json:"name"`             // the import's id, or the event's name
	Source     string `json:"source,omitempty"` // the treatment file, for EventFile
	Listed     int    `json:"listed_units"`     // units the assignment lists as treated (EventFile); 0 for imports
	FirstMonth string `json:"first_month"`      // YYYY-MM
	LastMonth  string `json:"last_month"`       // YYYY-MM
}

// IsImport reports whether the report's treatment is an import (as opposed
// to an event given as data).
func (r *Report) IsImport() bool { return r.Event.Kind != EventFile }

// EventName is what the report's text calls the treatment: the event's name
// for an assignment, "import ID" for an import.
func (r *Report) EventName() string {
	if r.IsImport() {
		return "import " + r.Import.ID
	}
	return r.Event.Name
}

// RunTreatment audits the event of assignment a instead of a detected
// import: study.BuildAssigned builds the panel (every episode of eps is an
// other import: its changesets are left out of the outcomes, and units it
// edited inside the window are no clean controls unless listed as treated),
// and the estimators, checks, warnings and cautions are those of Run. The
// report's Event says the treatment came from a file; its Import object
// describes the event (id: its name, months: its span, matchers: the file).
func RunTreatment(ctx context.Context, src Source, a *study.Assignment, eps []episode.Episode, units study.UnitIndex, opts Options) (*Report, error) {
	so := opts.Study.WithDefaults()
	so.OtherImports = append(append(so.OtherImports[:0:0], so.OtherImports...), study.OtherChangesets("", eps)...)
	st, err := study.BuildAssigned(ctx, src, a, units, so)
	if err != nil {
		return nil, err
	}
	est, err := did.Estimate(ctx, st.Panel, estimateOptions(so, opts))
	if err != nil {
		return nil, fmt.Errorf("estimate: %w", err)
	}
	first, last := a.Span()
	ev := &episode.Episode{ID: a.Event, Matchers: []string{"treatment file " + a.Source}, Accounts: []episode.Account{},
		Changesets: a.Changesets, Classes: []episode.ClassCount{}, First: first, Last: last,
		FirstMonth: first.Format("2006-01"), LastMonth: last.Format("2006-01")}
	r := newReport(ev, st, est, so, opts.UnitSpec)
	r.Event = EventSummary{Kind: EventFile, Name: a.Event, Source: a.Source, Listed: len(a.Starts),
		FirstMonth: ev.FirstMonth, LastMonth: ev.LastMonth}
	r.Provenance = NewProvenance(opts.Generator)
	r.Provenance.Window, r.Provenance.Units = st.Window, opts.UnitSpec
	r.Provenance.Note = fmt.Sprintf("treatment read from %s: %d units with their first treated months (%s to %s); no import detection chose the treated units",
		a.Source, len(a.Starts), ev.FirstMonth, ev.LastMonth)
	return r, nil
}

// importEvent is the EventSummary of an import's audit.
func importEvent(ep *episode.Episode) EventSummary {
	return EventSummary{Kind: EventImport, Name: ep.ID, FirstMonth: ep.FirstMonth, LastMonth: ep.LastMonth}
}
