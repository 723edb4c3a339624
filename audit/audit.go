package audit

import (
	"context"
	"encoding/json"
	"fmt"
	"io"
	"slices"
	"sort"

	"github.com/loadwake/loadwake/audit/checklist"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/retention"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// Source is everything an audit reads from the store: changesets and versions
// for import detection, and the classified events. *ingest.Store meets it.
type Source interface {
	episode.Source
	layers.DerivedReader
}

// Schema names the version of the audit JSON contract (README, "The
// audit JSON").
const Schema = "loadwake-audit/1"

// ImportSummary is the "import" object of the audit JSON.
type ImportSummary struct {
	ID         string               `json:"id"`
	Accounts   []string             `json:"accounts"`
	Changesets int                  `json:"changesets"`
	FirstMonth string               `json:"first_month"`
	LastMonth  string               `json:"last_month"`
	Created    int                  `json:"created"`
	Modified   int                  `json:"modified"`
	Deleted    int                  `json:"deleted"`
	Classes    []episode.ClassCount `json:"classes"`
	Matchers   []string             `json:"matchers"`
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

// Report is the audit of one import: the contract written by `loadwake
// audit --json` and as report.json. Field names and meanings are documented
// in the README; new fields may be added, existing ones keep their meaning
// while Schema stays the same.
type Report struct {
	Schema     string              `json:"schema"`
	Event      EventSummary        `json:"event"` // what the treatment is: an import, or an event from a file
	Import     ImportSummary       `json:"import"`
	Window     [2]string           `json:"window"` // first and last panel month, YYYY-MM
	Before     int                 `json:"before_months"`
	After      int                 `json:"after_months"`
	Units      study.UnitCounts    `json:"units"`
	Effects    []did.Effect        `json:"effects"`
	EventStudy []did.EventStudyRow `json:"event_study"`
	ByCohort   []did.CohortRow     `json:"by_cohort"`
	Placebo    []did.PlaceboRow    `json:"placebo"`
	// Robustness compares each other estimator with the headline per layer.
	Robustness []Agreement `json:"robustness"`
	// UnitFigures are descriptive observed and expected edits per import
	// area (UnitFigure), not per-area effects.
	UnitFigures []UnitFigure `json:"unit_figures"`
	// Splits are the headline by area traits (AddSplits); nil when none
	// was asked for.
	Splits     *did.Splits   `json:"splits,omitempty"`
	Balance    []BalanceJSON `json:"balance"`
	Estimation struct {
		Window did.Window `json:"event_window"`
		Draws  int        `json:"bootstrap_draws"`
		Seed   uint64     `json:"seed"`
	} `json:"estimation"`
	// Provenance says where the figures come from.
	Provenance *Provenance      `json:"provenance"`
	Warnings   []string         `json:"warnings"`
	Notes      []string         `json:"notes"`
	Cautions   []string         `json:"cautions"`
	UnitList   []study.UnitInfo `json:"unit_list"`
	// Retention follows the accounts that started editing in the import and
	// comparison areas (package retention); figures about groups, never about
	// a person. Absent when the audit skipped it or it could not be computed
	// (a note says why).
	Retention *retention.Result `json:"retention,omitempty"`

	// Study is the panel behind the report, for charts and exports; not in JSON.
	Study *study.Study `json:"-"`
}

// Options configures Run.
type Options struct {
	Study    study.Options
	Estimate did.Options // zero value: did.DefaultOptions with the study's window
	UnitSpec string      // how the units were given, for the report
	// Generator says what made the report, for its provenance.
	Generator Generator
	// NoRetention skips the newcomer retention section (one more pass over
	// the store's events).
	NoRetention bool
}

// Run builds the study of episode ep (its matched panel) and estimates
// every outcome. others are all detected episodes: units they edited are not
// clean controls.
func Run(ctx context.Context, src Source, ep *episode.Episode, others []episode.Episode, units study.UnitIndex, opts Options) (*Report, error) {
	so := opts.Study.WithDefaults()
	st, err := study.ForEpisode(ctx, src, ep, others, units, so)
	if err != nil {
		return nil, err
	}
	eo := estimateOptions(so, opts)
	est, err := did.Estimate(ctx, st.Panel, eo)
	if err != nil {
		return nil, fmt.Errorf("estimate: %w", err)
	}
	r := newReport(ep, st, est, so, opts.UnitSpec)
	r.Event = importEvent(ep)
	if !opts.NoRetention {
		ret, note, err := newcomerRetention(ctx, src, st, units, ep, others, so, eo)
		if err != nil {
			return nil, err
		}
		r.Retention = ret
		if note != "" {
			r.Notes = append(r.Notes, note)
		}
	}
	r.Provenance = NewProvenance(opts.Generator)
	r.Provenance.Window, r.Provenance.Units = st.Window, opts.UnitSpec
	if err := r.Provenance.addImport(ctx, src, ep); err != nil {
		return nil, err
	}
	return r, nil
}

// estimateOptions are the estimator options of a study: opts.Estimate, or
// the defaults with the study's window. One place for Run and RunTreatment,
// so that an assignment's audit estimates exactly as an import's.
func estimateOptions(so study.Options, opts Options) did.Options {
	eo := opts.Estimate
	if eo.Draws == 0 {
		def := did.DefaultOptions()
		def.Window = did.Window{Pre: min(so.Before, 12), Post: so.After}
		eo = def
	}
	if eo.Family == nil {
		eo.Family = familyLayers()
	}
	return eo
}

func newReport(ep *episode.Episode, st *study.Study, est *did.Estimates, so study.Options, spec string) *Report {
	r := &Report{Schema: Schema, Window: st.Window, Before: so.Before, After: so.After, Robustness: []Agreement{},
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
	for _, b := range st.Balance {
		r.Balance = append(r.Balance, BalanceJSON{Covariate: b.Name, MeanTreated: orZero(b.MeanTreated),
			MeanControl: orZero(b.MeanControl), MatchedMeanControl: orZero(b.MatchedMeanControl),
			SMDBefore: orZero(b.SMD), SMDAfter: orZero(b.MatchedSMD), FlagBefore: b.Imbalanced, FlagAfter: b.MatchedImbalanced})
	}
	var alarms, signNotes []string
	r.Robustness, alarms, signNotes = robustness(est.Effects)
	r.Warnings = orderWarnings(alarms, est.Warnings, growthWarnings(st.Balance, r.Units.Treated, controlWeights(st.Panel)))
	r.Notes = append(r.Notes, est.Notes...)
	r.Notes = append(r.Notes, signNotes...)
	r.UnitFigures = unitFigures(st.Panel, est.Window)
	if st.Outside > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("%d events fell outside every unit and were not counted", st.Outside))
	}
	if st.Unlocated > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("%d events had no location (missing nodes) and were not counted", st.Unlocated))
	}
	r.Cautions = append(append([]string{}, est.Cautions...), Cautions...)
	return r
}

// Cautions close every audit: what the figures can and cannot carry.
var Cautions = []string{
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
func (r *Report) WriteJSON(w io.Writer) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(r)
}

// LayerEffects returns the effects of the four layers, in layer order and then
// estimator order (cs-att, ppml-twfe, twfe-linear, did-2x2).
func (r *Report) LayerEffects() []did.Effect {
	order := map[string]int{"cs-att": 0, "ppml-twfe": 1, "twfe-linear": 2, "did-2x2": 3}
	var out []did.Effect
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

// Headline returns the headline estimator's effect for a layer or outcome.
func (r *Report) Headline(layer string) (did.Effect, bool) {
	for _, e := range r.Effects {
		if e.Layer == layer && e.Estimator == did.Headline {
			return e, true
		}
	}
	return did.Effect{}, false
}

// ChecklistOf is the whole checklist step for one detected import: the
// study of ep over units (the changesets of the other detected imports kept
// out of the controls and of the references) and its checklist.
func ChecklistOf(ctx context.Context, src Source, r *rules.RuleSet, ep *episode.Episode, all []episode.Episode, units study.UnitIndex, so study.Options, co checklist.Options) (*checklist.Checklist, error) {
	st, err := study.ForEpisode(ctx, src, ep, all, units, so)
	if err != nil {
		return nil, fmt.Errorf("import %s: %w", ep.ID, err)
	}
	co.OtherImports = append(slices.Clone(co.OtherImports), study.OtherChangesets(ep.ID, all)...)
	return checklist.Build(ctx, src, r, st, units, co)
}

// PastOptions configures AssessPast.
type PastOptions struct {
	Units     study.UnitIndex // spatial units of the past imports' studies
	Audit     Options
	Checklist checklist.Options
	// Episodes are every detected import (their changesets are kept out of
	// controls); nil means episode.Detect with the rules.
	Episodes []episode.Episode
}

// AssessPast audits each of the assessment's nearest past imports — Run and the
// checklist of the same study, as `loadwake audit` and `loadwake checklist`
// do — and adds the results with AddPastAudits. An import that cannot be
// audited (no controls, no pre-period, ...) is named in the notes and
// skipped.
func AssessPast(ctx context.Context, a *proposal.Assessment, src Source, r *rules.RuleSet, opts PastOptions) error {
	if opts.Units == nil {
		return fmt.Errorf("%w: no units for the past imports' studies", study.ErrStudy)
	}
	eps := opts.Episodes
	if eps == nil {
		var err error
		if eps, err = episode.Detect(ctx, src, r, episode.Options{}); err != nil {
			return fmt.Errorf("audit: assess: %w", err)
		}
	}
	effects := map[string][]did.Effect{}
	checklists := map[string]*checklist.Checklist{}
	for _, m := range a.Nearest {
		if err := ctx.Err(); err != nil {
			return err
		}
		ep := m.Episode
		var others []episode.Episode
		for _, e := range eps {
			if e.ID != ep.ID {
				others = append(others, e)
			}
		}
		ao := opts.Audit
		ao.NoRetention = true // the assessment reads the effects and the checklist only
		rep, err := Run(ctx, src, &ep, others, opts.Units, ao)
		if err != nil {
			a.Notes = append(a.Notes, fmt.Sprintf("past import %s not audited: %v", ep.ID, err))
			continue
		}
		effects[ep.ID] = rep.Effects
		co := opts.Checklist
		co.OtherImports = append(slices.Clone(co.OtherImports), study.OtherChangesets(ep.ID, eps)...)
		cl, err := checklist.Build(ctx, src, r, rep.Study, opts.Units, co)
		if err != nil {
			a.Notes = append(a.Notes, fmt.Sprintf("past import %s: no checklist: %v", ep.ID, err))
			continue
		}
		checklists[ep.ID] = cl
	}
	a.AddPastAudits(effects, checklists)
	return nil
}
