package rollout

import (
	"context"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"slices"
	"strings"
	"time"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/power"
	"github.com/loadwake/loadwake/layers"
)

// ReadPlan reads a plan written by WriteJSON. A file of another schema, or
// whose units, waves or months do not hold together, is refused with an
// error naming it.
func ReadPlan(path string) (*Plan, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("rollout: read plan: %w", err)
	}
	var pl Plan
	if err := json.Unmarshal(data, &pl); err != nil {
		var se *json.SyntaxError
		if errors.As(err, &se) {
			return nil, fmt.Errorf("%w: %s: byte %d: %v", ErrPlan, path, se.Offset, err)
		}
		return nil, fmt.Errorf("%w: %s: %v", ErrPlan, path, err)
	}
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s: %s", ErrPlan, path, fmt.Sprintf(format, args...))
	}
	switch {
	case pl.Schema != Schema:
		return nil, bad("schema %q, want %q (a plan written by loadwake plan)", pl.Schema, Schema)
	case pl.Waves < 2 || len(pl.Units) < pl.Waves:
		return nil, bad("%d units in %d waves", len(pl.Units), pl.Waves)
	case pl.Procedure != Procedure:
		return nil, bad("assignment procedure %q is not %q: its draws cannot be repeated", pl.Procedure, Procedure)
	}
	if _, err := time.Parse("2006-01", pl.Evaluation); err != nil {
		return nil, bad("evaluation month %q: want YYYY-MM", pl.Evaluation)
	}
	seen := map[string]bool{}
	for i, u := range pl.Units {
		if _, err := time.Parse("2006-01", u.Start); err != nil {
			return nil, bad("unit %d (%s): start month %q: want YYYY-MM", i+1, u.ID, u.Start)
		}
		if u.Wave < 1 || u.Wave > pl.Waves || u.ID == "" || seen[u.ID] {
			return nil, bad("unit %d (%q): wave %d of %d, or a missing or repeated id", i+1, u.ID, u.Wave, pl.Waves)
		}
		seen[u.ID] = true
	}
	return &pl, nil
}

// Treatment returns the first treated month of every unit the evaluation
// counts as treated: the units of every wave but the last, from their
// wave's start. The last wave's units are not yet treated when the
// evaluation is made and serve as the comparison.
func (pl *Plan) Treatment() map[string]time.Time {
	out := map[string]time.Time{}
	for _, u := range pl.Units {
		if u.Wave < pl.Waves {
			t, _ := time.Parse("2006-01", u.Start)
			out[u.ID] = t
		}
	}
	return out
}

// Redraw deals the plan's units to waves again with the plan's procedure,
// its recorded activity and blocks, and seed; Redraw(pl.Seed) gives the
// plan's own waves (1-based, in the order of pl.Units).
func (pl *Plan) Redraw(seed uint64) ([]int, error) {
	act := make([]float64, len(pl.Units))
	var blocks []string
	for i, u := range pl.Units {
		act[i] = u.Activity
		if u.Block != "" && blocks == nil {
			blocks = make([]string, len(pl.Units))
		}
	}
	for i, u := range pl.Units {
		if blocks != nil {
			blocks[i] = u.Block
		}
	}
	w, err := Assign(act, blocks, pl.Waves, seed)
	if err != nil {
		return nil, err
	}
	for i := range w {
		w[i]++
	}
	return w, nil
}

// RandomizationP is the randomization-inference p-value of a statistic of
// the wave assignment: stat is evaluated on the plan's own waves and on
// draws re-drawn assignments (Redraw with seeds seed+1, seed+2, ...), and p
// is (1 + #{|S_r| ≥ |S_obs|}) / (1 + draws), two-sided, valid at any number
// of draws (Phipson & Smyth 2010). Under the null of no effect on any
// unit, the assignment is the only random part, so the test has its level
// exactly whatever the outcome's distribution.
func (pl *Plan) RandomizationP(ctx context.Context, stat func(waves []int) (float64, error), draws int) (p, observed float64, err error) {
	if draws < 1 {
		return 0, 0, fmt.Errorf("%w: %d randomization draws", ErrPlan, draws)
	}
	own := make([]int, len(pl.Units))
	for i, u := range pl.Units {
		own[i] = u.Wave
	}
	if observed, err = stat(own); err != nil {
		return 0, 0, err
	}
	if math.IsNaN(observed) {
		return 0, 0, fmt.Errorf("%w: the statistic is not a number under the plan's assignment", ErrPlan)
	}
	hits := 0
	for r := range draws {
		if err := ctx.Err(); err != nil {
			return 0, 0, err
		}
		w, err := pl.Redraw(pl.Seed + uint64(r) + 1)
		if err != nil {
			return 0, 0, err
		}
		s, err := stat(w)
		if err != nil {
			return 0, 0, err
		}
		if math.Abs(s) >= math.Abs(observed)-1e-12 {
			hits++
		}
	}
	return float64(1+hits) / float64(1+draws), observed, nil
}

// Deviation is a unit loaded otherwise than planned.
type Deviation struct {
	Unit    string `json:"unit"`
	Wave    int    `json:"wave"`              // 0: not in the plan
	Planned string `json:"planned,omitempty"` // YYYY-MM
	Loaded  string `json:"loaded,omitempty"`  // YYYY-MM of the import's first edit there; "" not loaded
	Kind    string `json:"kind"`              // "early", "late", "not loaded", "comparison loaded", "not in the plan"
}

// Deviations compares the plan with the months the import first reached
// each unit (loaded: unit id → YYYY-MM, from the store's changesets, as the
// audit's unit list gives them) up to the evaluation month: units loaded
// before or after their wave's month, planned units never loaded, units of
// the held-back wave loaded before the evaluation, and units loaded though
// not in the plan.
func (pl *Plan) Deviations(loaded map[string]string) []Deviation {
	var out []Deviation
	inPlan := map[string]bool{}
	for _, u := range pl.Units {
		inPlan[u.ID] = true
		got, ok := loaded[u.ID]
		if ok && got >= pl.Evaluation {
			ok = false // loaded after the evaluation: as planned for the last wave
		}
		d := Deviation{Unit: u.ID, Wave: u.Wave, Planned: u.Start, Loaded: got}
		switch {
		case u.Wave == pl.Waves && ok:
			d.Kind = "comparison loaded"
		case u.Wave == pl.Waves:
			continue
		case !ok:
			d.Kind, d.Loaded = "not loaded", ""
		case got < u.Start:
			d.Kind = "early"
		case got > u.Start:
			d.Kind = "late"
		default:
			continue
		}
		out = append(out, d)
	}
	for id, got := range loaded {
		if !inPlan[id] && got < pl.Evaluation {
			out = append(out, Deviation{Unit: id, Loaded: got, Kind: "not in the plan"})
		}
	}
	sortDeviations(out)
	return out
}

func sortDeviations(d []Deviation) {
	slices.SortStableFunc(d, func(a, b Deviation) int { return strings.Compare(a.Unit, b.Unit) })
}

// WriteTreatmentCSV writes the plan's treatment in the form `audit
// --treatment` reads: a header unit,start and one row per unit of the
// treated waves with its wave's first month. The held-back last wave is left
// out: it is the comparison.
func (pl *Plan) WriteTreatmentCSV(w io.Writer) error {
	cw := csv.NewWriter(w)
	cw.Write([]string{"unit", "start"})
	for _, u := range pl.Units {
		if u.Wave < pl.Waves {
			cw.Write([]string{u.ID, u.Start})
		}
	}
	cw.Flush()
	if err := cw.Error(); err != nil {
		return fmt.Errorf("rollout: write treatment CSV: %w", err)
	}
	return nil
}

// RIResult is the randomization-inference test of the headline on the
// evaluation panel: Observed is the headline's log ratio b under the plan's
// assignment (all units weighted 1), P the share of re-drawn assignments
// with |b| at least as large (RandomizationP).
type RIResult struct {
	Outcome  string  `json:"outcome"`
	Observed float64 `json:"log_ratio"`
	Relative float64 `json:"relative_effect"`
	P        float64 `json:"p_value"`
	Draws    int     `json:"draws"`
	Units    int     `json:"units"`
	Method   string  `json:"method"`
}

// RandomizationEffect tests the headline on outcome of the evaluation panel
// p by re-drawing the plan's assignment: for each assignment the panel's
// plan units are treated from their wave's first month (the last wave not
// treated), every unit weighted 1, and the headline's log ratio is the
// statistic. Units of p not in the plan are left out, and plan units the
// study excluded (edited by another import) are left out of every
// assignment's panel alike.
func (pl *Plan) RandomizationEffect(ctx context.Context, p *panel.Panel, outcome string, draws int, opts did.Options) (*RIResult, error) {
	o := slices.Index(p.Outcomes, outcome)
	if o < 0 {
		return nil, fmt.Errorf("%w: the evaluation panel has no outcome %q", ErrPlan, outcome)
	}
	row := map[string]int{}
	for i, u := range p.Units {
		row[u.ID] = i
	}
	waveMonth := make([]int, pl.Waves+1)
	for _, u := range pl.Units {
		t, _ := time.Parse("2006-01", u.Start)
		waveMonth[u.Wave] = p.MonthIndex(t)
	}
	sub := &panel.Panel{Start: p.Start, Months: p.Months, Outcomes: []string{outcome}, Y: [][]float64{nil}}
	var keep []int // plan unit index of each sub unit
	for k, u := range pl.Units {
		if i, ok := row[u.ID]; ok {
			keep = append(keep, k)
			sub.Units = append(sub.Units, panel.Unit{ID: u.ID, Weight: 1})
			sub.Y[0] = append(sub.Y[0], p.Y[o][i*p.Months:(i+1)*p.Months]...)
		}
	}
	if len(keep) < pl.Waves {
		return nil, fmt.Errorf("%w: only %d of the plan's %d units are in the evaluation panel; evaluate with the plan's units (plan.geojson)", ErrPlan, len(keep), len(pl.Units))
	}
	opts.Workers = 1
	stat := func(waves []int) (float64, error) {
		for i, k := range keep {
			w := waves[k]
			sub.Units[i].FirstTreated = -1
			if m := waveMonth[w]; w < pl.Waves && m >= 0 && m < p.Months {
				sub.Units[i].FirstTreated = m
			}
		}
		es, err := did.Estimate(ctx, sub, opts)
		if err != nil {
			return 0, err
		}
		for _, e := range es.Effects {
			if e.Estimator == did.Headline && e.RelativeEffect != nil {
				return math.Log1p(*e.RelativeEffect), nil
			}
		}
		return 0, nil // no estimate (too little activity): no evidence either way
	}
	pv, obs, err := pl.RandomizationP(ctx, stat, draws)
	if err != nil {
		return nil, err
	}
	return &RIResult{Outcome: outcome, Observed: obs, Relative: math.Expm1(obs), P: pv, Draws: draws, Units: len(keep),
		Method: fmt.Sprintf("%s's log ratio under %d assignments re-drawn with %s from seeds %d+1.., every unit weighted 1, %d of the plan's %d units in the panel; p = (1 + #|b_r| >= |b|) / (1 + draws)",
			did.Headline, draws, pl.Procedure, pl.Seed, len(keep), len(pl.Units))}, nil
}

// LoadedMonths returns, per unit, the month (YYYY-MM) of the first edit of
// the given changesets located in it: when the import reached each unit.
func LoadedMonths(ctx context.Context, src layers.DerivedReader, changesets []osm.ChangesetID, units power.Units) (map[string]string, error) {
	out := map[string]string{}
	for _, c := range changesets {
		err := layers.ScanChangesetEvents(ctx, src, c, func(e *layers.Event) error {
			if !e.Located {
				return nil
			}
			u, ok := units.Locate(e.Location)
			if !ok {
				return nil
			}
			m := e.Time.UTC().Format("2006-01")
			if cur, ok := out[units.ID(u)]; !ok || m < cur {
				out[units.ID(u)] = m
			}
			return nil
		})
		if err != nil {
			return nil, fmt.Errorf("rollout: scan changeset %d: %w", c, err)
		}
	}
	return out, nil
}
