package power

import (
	"context"
	"errors"
	"fmt"
	"time"

	"github.com/paulmach/orb"
	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/layers"
)

// ErrPower is the sentinel under errors that make a power analysis impossible.
var ErrPower = errors.New("power: cannot analyse power")

// Units are the spatial units activity is counted in; the units of
// spatial.Build meet it.
type Units interface {
	Len() int
	ID(i int) string
	Locate(p orb.Point) (int, bool)
}

// Layers are the outcomes Activity counts: the four edit layers.
var Layers = []string{layers.Geometry.String(), layers.Attribute.String(), layers.NewFeature.String(), layers.Deletion.String()}

// ActivityOptions chooses the months Activity counts.
type ActivityOptions struct {
	Months int       // months of history to count, ending at End (default 24)
	End    time.Time // first month after the history; zero: the month after the store's last event
	// Exclude lists changesets whose edits are not follow-on activity: past
	// imports' changesets.
	Exclude []osm.ChangesetID
}

// Activity counts, per unit and month, the store's events of each layer in
// the Months months before End, leaving out the excluded changesets. Every
// unit is untreated in the panel it returns.
func Activity(ctx context.Context, src layers.DerivedReader, units Units, opts ActivityOptions) (*panel.Panel, error) {
	if opts.Months <= 0 {
		opts.Months = 24
	}
	if units == nil || units.Len() == 0 {
		return nil, fmt.Errorf("%w: no units", ErrPower)
	}
	end := opts.End
	if end.IsZero() {
		var last time.Time
		if err := layers.ScanEvents(ctx, src, time.Time{}, time.Time{}, func(e *layers.Event) error {
			last = e.Time
			return nil
		}); err != nil {
			return nil, fmt.Errorf("power: scan events: %w", err)
		}
		if last.IsZero() {
			return nil, fmt.Errorf("%w: the store holds no classified events (run loadwake classify)", ErrPower)
		}
		end = MonthStart(last).AddDate(0, 1, 0)
	}
	end = MonthStart(end)
	start := end.AddDate(0, -opts.Months, 0)
	skip := make(map[osm.ChangesetID]bool, len(opts.Exclude))
	for _, c := range opts.Exclude {
		skip[c] = true
	}
	n, T := units.Len(), opts.Months
	p := &panel.Panel{Start: start, Months: T, Outcomes: Layers, Y: make([][]float64, len(Layers))}
	for o := range p.Y {
		p.Y[o] = make([]float64, n*T)
	}
	idx := map[layers.Layer]int{layers.Geometry: 0, layers.Attribute: 1, layers.NewFeature: 2, layers.Deletion: 3}
	err := layers.ScanEvents(ctx, src, start, end, func(e *layers.Event) error {
		o, ok := idx[e.Layer]
		if !ok || !e.Located || skip[e.Changeset] {
			return nil
		}
		u, ok := units.Locate(e.Location)
		if !ok {
			return nil
		}
		t := p.MonthIndex(e.Time)
		if t >= 0 && t < T {
			p.Y[o][u*T+t]++
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("power: scan events: %w", err)
	}
	p.Units = make([]panel.Unit, n)
	for i := range p.Units {
		p.Units[i] = panel.Unit{ID: units.ID(i), FirstTreated: -1, Weight: 1}
	}
	return p, nil
}

// MonthStart returns the first instant of t's UTC month.
func MonthStart(t time.Time) time.Time {
	t = t.UTC()
	return time.Date(t.Year(), t.Month(), 1, 0, 0, 0, 0, time.UTC)
}
