package audit

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"slices"
	"sort"
	"strings"

	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// Source is everything an audit reads from the store: changesets and versions
// for import detection, and the classified events. *ingest.Store meets it.
type Source interface {
	HistorySource
	layers.DerivedReader
}

// SchemaAudit names the version of the audit JSON contract (README, "The
// audit JSON").
const SchemaAudit = "loadwake-audit/1"

// Ref returns what a study needs to know of the episode.
func (e *Episode) Ref() ImportRef {
	r := ImportRef{ID: e.ID, Changesets: e.Changesets, First: e.First, Last: e.Last}
	for _, a := range e.Accounts {
		r.UIDs = append(r.UIDs, a.UID)
		r.Accounts = append(r.Accounts, a.Name)
	}
	return r
}

// FindEpisode returns the episode with the given id. An empty id picks the only
// episode when there is exactly one. The error of an unknown id lists the known
// ones.
func FindEpisode(eps []Episode, id string) (*Episode, error) {
	if id == "" && len(eps) == 1 {
		return &eps[0], nil
	}
	for i := range eps {
		if eps[i].ID == id {
			return &eps[i], nil
		}
	}
	known := make([]string, len(eps))
	for i, e := range eps {
		known[i] = e.ID
	}
	switch {
	case len(eps) == 0:
		return nil, fmt.Errorf("%w: the store holds no detected import; name one with --changesets or --account", ErrNoImport)
	case id == "":
		return nil, fmt.Errorf("%w: choose one with --import: %s", ErrNoImport, strings.Join(known, ", "))
	}
	return nil, fmt.Errorf("%w: %q; known imports: %s", ErrNoImport, id, strings.Join(known, ", "))
}

// ImportSummary is the "import" object of the audit JSON.
type ImportSummary struct {
	ID         string       `json:"id"`
	Accounts   []string     `json:"accounts"`
	Changesets int          `json:"changesets"`
	FirstMonth string       `json:"first_month"`
	LastMonth  string       `json:"last_month"`
	Created    int          `json:"created"`
	Modified   int          `json:"modified"`
	Deleted    int          `json:"deleted"`
	Classes    []ClassCount `json:"classes"`
	Matchers   []string     `json:"matchers"`
}

// UnitCounts is the "units" object of the audit JSON.
type UnitCounts struct {
	Spec       string `json:"spec"`
	Total      int    `json:"total"`
	Treated    int    `json:"treated"`
	Controls   int    `json:"controls"`
	Dropped    int    `json:"dropped"`
	Excluded   int    `json:"excluded"`
	Unmatched  int    `json:"unmatched"`
	Outside    int64  `json:"events_outside_units"`
	Unlocated  int64  `json:"events_without_location"`
	Covariates int    `json:"covariates"`
}

// Counts tallies the study's units by role; spec says how they were given.
func (st *Study) Counts(spec string) UnitCounts {
	c := UnitCounts{Spec: spec, Total: len(st.Units), Outside: st.Outside, Unlocated: st.Unlocated, Covariates: len(st.Covariates)}
	for _, u := range st.Units {
		switch u.Status {
		case StatusTreated:
			c.Treated++
		case StatusControl:
			c.Controls++
		case StatusDropped:
			c.Dropped++
		case StatusExcluded:
			c.Excluded++
		default:
			c.Unmatched++
		}
	}
	return c
}

// BalanceJSON is one row of the audit JSON's "balance" list.
type BalanceJSON struct {
	Covariate          string  `json:"covariate"`
	MeanTreated        float64 `json:"mean_treated"`
	MeanControl        float64 `json:"mean_control"`
	MatchedMeanControl float64 `json:"matched_mean_control"`
	SMDBefore          float64 `json:"smd_before"`
	SMDAfter           float64 `json:"smd_after"`
	FlagBefore         bool    `json:"imbalanced_before"`
	FlagAfter          bool    `json:"imbalanced_after"`
}

// AuditReport is the audit of one import: the contract written by `loadwake
// audit --json` and as report.json. Field names and meanings are documented
// in the README; new fields may be added, existing ones keep their meaning
// while Schema stays the same.
type AuditReport struct {
	Schema     string          `json:"schema"`
	Import     ImportSummary   `json:"import"`
	Window     [2]string       `json:"window"` // first and last panel month, YYYY-MM
	Before     int             `json:"before_months"`
	After      int             `json:"after_months"`
	Units      UnitCounts      `json:"units"`
	Effects    []Effect        `json:"effects"`
	EventStudy []EventStudyRow `json:"event_study"`
	ByCohort   []CohortRow     `json:"by_cohort"`
	Placebo    []PlaceboRow    `json:"placebo"`
	Balance    []BalanceJSON   `json:"balance"`
	Estimation struct {
		Window Window `json:"event_window"`
		Draws  int    `json:"bootstrap_draws"`
		Seed   uint64 `json:"seed"`
	} `json:"estimation"`
	Warnings []string   `json:"warnings"`
	Notes    []string   `json:"notes"`
	Cautions []string   `json:"cautions"`
	UnitList []UnitInfo `json:"unit_list"`

	// Study is the panel behind the report, for charts and exports; not in JSON.
	Study *Study `json:"-"`
}

// AuditOptions configures RunAudit.
type AuditOptions struct {
	Study    StudyOptions
	Estimate EstimateOptions // zero value: DefaultEstimateOptions with the study's window
	UnitSpec string          // how the units were given, for the report
}

// StudyImport builds the study of episode ep over units, keeping the units
// that any other of the detected episodes all edited out of the controls.
func StudyImport(ctx context.Context, src layers.DerivedReader, ep *Episode, all []Episode, units UnitIndex, so StudyOptions) (*Study, error) {
	so.OtherImports = append(slices.Clone(so.OtherImports), otherChangesets(ep.ID, all)...)
	return BuildStudy(ctx, src, ep.Ref(), units, so)
}

// RunAudit builds the study of episode ep (its matched panel) and estimates
// every outcome. others are all detected episodes: units they edited are not
// clean controls.
func RunAudit(ctx context.Context, src Source, ep *Episode, others []Episode, units UnitIndex, opts AuditOptions) (*AuditReport, error) {
	so := opts.Study.withDefaults()
	st, err := StudyImport(ctx, src, ep, others, units, so)
	if err != nil {
		return nil, err
	}
	eo := opts.Estimate
	if eo.Draws == 0 {
		def := DefaultEstimateOptions()
		def.Window = Window{Pre: min(so.Before, 12), Post: so.After}
		eo = def
	}
	est, err := Estimate(ctx, st.Panel, eo)
	if err != nil {
		return nil, fmt.Errorf("estimate: %w", err)
	}
	return newAuditReport(ep, st, est, so, opts.UnitSpec), nil
}

func newAuditReport(ep *Episode, st *Study, est *Estimates, so StudyOptions, spec string) *AuditReport {
	r := &AuditReport{Schema: SchemaAudit, Window: st.Window, Before: so.Before, After: so.After,
		Effects: est.Effects, EventStudy: est.EventStudy, ByCohort: est.ByCohort, Placebo: est.Placebo, Study: st,
		Warnings: []string{}, Notes: append([]string{}, st.Notes...), UnitList: st.Units}
	r.Import = ImportSummary{ID: ep.ID, Changesets: len(ep.Changesets), FirstMonth: ep.FirstMonth,
		LastMonth: ep.LastMonth, Created: ep.Created, Modified: ep.Modified, Deleted: ep.Deleted,
		Classes: ep.Classes, Matchers: ep.Matchers, Accounts: []string{}}
	for _, a := range ep.Accounts {
		r.Import.Accounts = append(r.Import.Accounts, a.Name)
	}
	r.Units = st.Counts(spec)
	r.Estimation.Window, r.Estimation.Draws, r.Estimation.Seed = est.Window, est.Draws, est.Seed
	var poor []string
	for _, b := range st.Balance {
		r.Balance = append(r.Balance, BalanceJSON{Covariate: b.Name, MeanTreated: orZero(b.MeanTreated),
			MeanControl: orZero(b.MeanControl), MatchedMeanControl: orZero(b.MatchedMeanControl),
			SMDBefore: orZero(b.SMD), SMDAfter: orZero(b.MatchedSMD), FlagBefore: b.Imbalanced, FlagAfter: b.MatchedImbalanced})
		if b.MatchedImbalanced {
			poor = append(poor, b.Name)
		}
	}
	if len(poor) > 0 {
		r.Warnings = append(r.Warnings, fmt.Sprintf("poor balance after matching (|SMD| >= %.1f, Austin 2009) on: %s; matched controls differ from import areas before the import",
			BalanceThreshold, strings.Join(poor, ", ")))
	}
	r.Warnings = append(r.Warnings, est.Warnings...)
	if st.Outside > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("%d events fell outside every unit and were not counted", st.Outside))
	}
	if st.Unlocated > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("%d events had no location (missing nodes) and were not counted", st.Unlocated))
	}
	r.Cautions = append(append([]string{}, est.Cautions...), AuditCautions...)
	return r
}

// AuditCautions close every audit: what the figures can and cannot carry.
var AuditCautions = []string{
	"An import changes the map for every mapper nearby: read these figures with the local community, and follow the community's import guidelines (documentation, licence compatible with the ODbL, discussion, a dedicated account) and local review before any upload.",
}

// finite maps NaN and ±Inf to 0 so the JSON always marshals; callers that
// need to tell them apart keep the raw value.
func orZero(x float64) float64 {
	if x != x || x > 1e308 || x < -1e308 {
		return 0
	}
	return x
}

// WriteJSON writes the report as indented JSON.
func (r *AuditReport) WriteJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(r)
}

// LayerEffects returns the effects of the four layers, in layer order and then
// estimator order (cs-att, ppml-twfe, twfe-linear, did-2x2).
func (r *AuditReport) LayerEffects() []Effect {
	order := map[string]int{"cs-att": 0, "ppml-twfe": 1, "twfe-linear": 2, "did-2x2": 3}
	var out []Effect
	for _, l := range layers.Layers {
		for _, e := range r.Effects {
			if e.Layer == l.String() {
				out = append(out, e)
			}
		}
	}
	sort.SliceStable(out, func(i, j int) bool {
		li, _ := layers.ParseLayer(out[i].Layer)
		lj, _ := layers.ParseLayer(out[j].Layer)
		if li != lj {
			return li < lj
		}
		return order[out[i].Estimator] < order[out[j].Estimator]
	})
	return out
}

// DetectAndFind detects the store's imports with the rules (or takes the one
// the user named) and returns all episodes and the chosen one.
func DetectAndFind(ctx context.Context, src HistorySource, r *rules.RuleSet, opts DetectOptions, id string) ([]Episode, *Episode, error) {
	var all []Episode
	var err error
	if opts.manual() {
		named, err := DetectImports(ctx, src, r, opts)
		if err != nil {
			return nil, nil, err
		}
		all, err = DetectImports(ctx, src, r, DetectOptions{})
		if err != nil {
			return nil, nil, err
		}
		if len(named) == 0 {
			return nil, nil, fmt.Errorf("%w: the named changesets or account hold nothing", ErrNoImport)
		}
		return append(all, named[0]), &named[0], nil
	}
	all, err = DetectImports(ctx, src, r, opts)
	if err != nil {
		return nil, nil, err
	}
	ep, err := FindEpisode(all, id)
	if err != nil {
		return nil, nil, err
	}
	return all, ep, nil
}

// HeadlineEstimator is the estimator reports lead with. Edit counts are skewed
// counts whose trends are multiplicative (busy areas gain and lose in
// proportion), so a comparison in levels can fail parallel trends where one in
// ratios holds; Poisson pseudo-maximum-likelihood with unit and month fixed
// effects, each cohort stacked with clean controls, estimates the ratio
// directly (Santos Silva & Tenreyro 2006; Wooldridge 1999) and recovers the
// simulator's planted effects (TestAuditRecoversPlantedEffects). The other
// estimators stay in every report as checks.
const HeadlineEstimator = "ppml-twfe"

// Headline returns the headline estimator's effect for a layer or outcome.
func (r *AuditReport) Headline(layer string) (Effect, bool) {
	for _, e := range r.Effects {
		if e.Layer == layer && e.Estimator == HeadlineEstimator {
			return e, true
		}
	}
	return Effect{}, false
}
