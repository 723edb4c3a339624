package audit

import (
	"cmp"
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"slices"

	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// OverviewSchema names the version of the overview JSON (README, "All
// imports at once").
const OverviewSchema = "loadwake-overview/1"

// DefaultTopKeys is how many neglected keys an overview row lists when
// OverviewOptions.TopKeys is zero.
const DefaultTopKeys = 3

// Overview is the audit of every import in a store, one row each: the table
// a community reads before a debate about imports in its area.
type Overview struct {
	Schema    string `json:"schema"`
	Estimator string `json:"estimator"` // the estimator of every effect (did.Headline)
	Units     string `json:"units"`     // how the units were given
	// Before and After are the panel months asked for around each import.
	Before     int           `json:"before_months"`
	After      int           `json:"after_months"`
	Imports    []OverviewRow `json:"imports"`
	Provenance *Provenance   `json:"provenance"`
	Cautions   []string      `json:"cautions"`
}

// OverviewRow is one import of an Overview. Error is set, and the figures
// are empty, when the import could not be audited.
type OverviewRow struct {
	Import     string   `json:"import"`
	Accounts   []string `json:"accounts"`
	FirstMonth string   `json:"first_month"`
	LastMonth  string   `json:"last_month"`
	Changesets int      `json:"changesets"`
	Created    int      `json:"created"`
	Modified   int      `json:"modified"`
	Deleted    int      `json:"deleted"`
	// ImportAreas are the ids of the units the import reached enough to
	// be treated, ImportAreaNames their names where the units have names
	// (else the id), in the same order.
	ImportAreas     []string `json:"import_areas"`
	ImportAreaNames []string `json:"import_area_names"`
	ComparisonAreas int      `json:"comparison_areas"`
	// Window is the months the panel covers, YYYY-MM.
	Window [2]string `json:"window"`
	// Effects is the headline estimate of each layer the audit could
	// estimate, in layer order.
	Effects []OverviewEffect `json:"effects"`
	// TopKeys are the first neglected keys of the import's checklist.
	TopKeys  []OverviewKey `json:"top_keys"`
	Warnings []string      `json:"warnings"`
	Error    string        `json:"error,omitempty"`
}

// OverviewEffect is one layer's headline estimate in an overview row.
type OverviewEffect struct {
	Layer          string     `json:"layer"`
	RelativeEffect *float64   `json:"relative_effect"` // share; nil when the estimator gave none
	ATT            float64    `json:"att"`             // events per unit-month
	CI95           [2]float64 `json:"ci95"`            // of relative_effect where given, else of att
	PValue         float64    `json:"p_value"`
	NoInterval     bool       `json:"no_interval"` // too few import areas for a reliable interval
	PreTrendFailed bool       `json:"pre_trend_failed"`
}

// OverviewKey is a neglected key in an overview row.
type OverviewKey struct {
	Key            string  `json:"key"`
	Class          string  `json:"class"`
	ImportShare    float64 `json:"import_share"`
	ReferenceShare float64 `json:"reference_share"`
	Affected       int     `json:"affected"` // imported features without the key
}

// OverviewOptions configures AuditAll.
type OverviewOptions struct {
	Audit     Options
	Checklist checklist.Options
	// TopKeys is how many neglected keys each row lists (0:
	// DefaultTopKeys).
	TopKeys int
	// Progress, when set, is called before each import is audited with its
	// position (0-based), the number of imports and its id.
	Progress func(i, n int, id string)
}

// AuditAll audits every episode of eps as Run does, with the checklist of the
// same study, and gathers one row per import. An import that cannot be
// audited (no comparison areas, no time before it, ...) keeps its row with
// the reason in Error; only cancellation and store errors stop the run.
func AuditAll(ctx context.Context, src Source, r *rules.RuleSet, eps []episode.Episode, units study.UnitIndex, opts OverviewOptions) (*Overview, error) {
	if units == nil {
		return nil, fmt.Errorf("%w: no units for the overview", study.ErrStudy)
	}
	so := opts.Audit.Study.WithDefaults()
	ov := &Overview{Schema: OverviewSchema, Estimator: did.Headline, Units: opts.Audit.UnitSpec,
		Before: so.Before, After: so.After, Imports: []OverviewRow{}}
	ov.Provenance = NewProvenance(opts.Audit.Generator)
	ov.Provenance.Units = opts.Audit.UnitSpec
	top := opts.TopKeys
	if top <= 0 {
		top = DefaultTopKeys
	}
	for i := range eps {
		if err := ctx.Err(); err != nil {
			return nil, err
		}
		ep := &eps[i]
		if opts.Progress != nil {
			opts.Progress(i, len(eps), ep.ID)
		}
		row, err := overviewRow(ctx, src, r, ep, eps, units, opts, top)
		if err != nil {
			return nil, err
		}
		ov.Imports = append(ov.Imports, row)
	}
	ov.Cautions = []string{
		"Each row is one import's audit, with its own import and comparison areas: rows are not ranked against each other, and an import's figures say nothing about the people behind its accounts.",
		"Episodes are found by the import rules and are candidates to check against each import's documentation and community discussion.",
		"These figures are evidence for the community's review, not a verdict; any new import follows the community's import guidelines and local review.",
	}
	return ov, nil
}

// overviewRow audits one episode. Errors that say the import cannot be
// studied go into the row; cancellation is returned.
func overviewRow(ctx context.Context, src Source, r *rules.RuleSet, ep *episode.Episode, all []episode.Episode, units study.UnitIndex, opts OverviewOptions, top int) (OverviewRow, error) {
	row := OverviewRow{Import: ep.ID, Accounts: []string{}, FirstMonth: ep.FirstMonth, LastMonth: ep.LastMonth,
		Changesets: len(ep.Changesets), Created: ep.Created, Modified: ep.Modified, Deleted: ep.Deleted,
		ImportAreas: []string{}, ImportAreaNames: []string{}, Effects: []OverviewEffect{}, TopKeys: []OverviewKey{}, Warnings: []string{}}
	for _, a := range ep.Accounts {
		row.Accounts = append(row.Accounts, a.Name)
	}
	others := slices.DeleteFunc(slices.Clone(all), func(e episode.Episode) bool { return e.ID == ep.ID })
	rep, err := Run(ctx, src, ep, others, units, opts.Audit)
	if err != nil {
		if errors.Is(err, context.Canceled) || errors.Is(err, context.DeadlineExceeded) {
			return row, err
		}
		row.Error = err.Error()
		return row, nil
	}
	row.Window = rep.Window
	row.ComparisonAreas = rep.Units.Controls
	for _, u := range rep.UnitList {
		if u.Status == study.StatusTreated {
			row.ImportAreas = append(row.ImportAreas, u.ID)
			row.ImportAreaNames = append(row.ImportAreaNames, cmp.Or(u.Name, u.ID))
		}
	}
	for _, l := range layers.Layers {
		if e, ok := rep.Headline(l.String()); ok {
			row.Effects = append(row.Effects, overviewEffect(e))
		}
	}
	row.Warnings = append(row.Warnings, rep.Warnings...)
	co := opts.Checklist
	co.OtherImports = append(slices.Clone(co.OtherImports), study.OtherChangesets(ep.ID, all)...)
	cl, err := checklist.Build(ctx, src, r, rep.Study, units, co)
	if err != nil {
		if ctx.Err() != nil {
			return row, ctx.Err()
		}
		row.Warnings = append(row.Warnings, "no checklist: "+err.Error())
		return row, nil
	}
	row.TopKeys = topKeys(cl, top)
	return row, nil
}

func overviewEffect(e did.Effect) OverviewEffect {
	return OverviewEffect{Layer: e.Layer, RelativeEffect: e.RelativeEffect, ATT: e.ATT, CI95: e.CI95, PValue: e.PValue,
		NoInterval: e.NoInterval, PreTrendFailed: e.PreTrendP != nil && *e.PreTrendP < 0.05}
}

// topKeys returns the first n neglected keys of cl against its first
// reference that has any (matched comparison areas first).
func topKeys(cl *checklist.Checklist, n int) []OverviewKey {
	out := []OverviewKey{}
	for _, ref := range []string{checklist.RefMatchedControls, checklist.RefWithoutProvenance, checklist.RefTreatedBefore} {
		rows := cl.Neglected(ref)
		if len(rows) == 0 {
			continue
		}
		for _, r := range rows[:min(n, len(rows))] {
			out = append(out, OverviewKey{Key: r.Key, Class: r.Class, ImportShare: r.ImportShare, ReferenceShare: r.ReferenceShare, Affected: r.Affected})
		}
		break
	}
	return out
}

// Effect returns the row's effect for layer, ok false when there is none.
func (r *OverviewRow) Effect(layer string) (OverviewEffect, bool) {
	for _, e := range r.Effects {
		if e.Layer == layer {
			return e, true
		}
	}
	return OverviewEffect{}, false
}

// WriteJSON writes the overview as indented JSON.
func (o *Overview) WriteJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(o)
}
