package did

import (
	"errors"
	"fmt"
	"slices"
)

// ErrSeparated marks an outcome whose Poisson fit has no robust.Finite estimate:
// the import areas' counts are all zero on one side of the import
// (separation; Correia, Guimarães & Zylkin 2021 on existence of Poisson
// estimates).
var ErrSeparated = errors.New("did: Poisson layer separated")

// The estimators' options and results: what Estimate takes and returns, and
// what every estimator file shares.

const (
	EstimatorCS         = "cs-att"      // Callaway & Sant'Anna group-time ATT, aggregated
	EstimatorPPML       = "ppml-twfe"   // Poisson PML, stacked by cohort, unit and month fixed effects
	EstimatorTWFELinear = "twfe-linear" // linear event study, mean of lags
	EstimatorDiD2x2     = "did-2x2"     // classic 2x2 difference-in-differences
)

// Inference modes of Options.Inference.
const (
	InferenceAuto      = "auto"      // bootstrap when treated clusters < FewTreatedClusters, else analytic
	InferenceAnalytic  = "analytic"  // always analytic
	InferenceBootstrap = "bootstrap" // always bootstrap
)

// Scales of EventStudyRow.
const (
	ScaleRelative = "relative" // exp(b) − 1
	ScaleCount    = "count"    // events per unit-month
)

// Window is the event window around each cohort's first treated month: Pre
// months before (event times −Pre..−1) and Post months from it (0..Post−1).
type Window struct {
	Pre  int `json:"pre"`
	Post int `json:"post"`
}

// Options configures Estimate. Start from DefaultOptions.
type Options struct {
	Window       Window // event window; estimators use only these months around treatment
	Draws        int    // bootstrap draws (999)
	Seed         uint64 // seed of every random draw; equal seeds give equal output
	Inference    string // InferenceAuto, InferenceAnalytic or InferenceBootstrap
	PlaceboShift int    // months the placebo moves each start back (default Window.Pre/2, at least 1)
	Workers      int    // outcomes estimated in parallel; 0 = GOMAXPROCS
	// PoissonInference chooses the headline's interval with enough treated
	// clusters: PoissonScoreBootstrap (default, also for "") or PoissonCR1T
	// (also chosen by Inference = InferenceAnalytic).
	PoissonInference string
	// Family names the outcomes whose problems and headline pre-trend tests
	// are warnings, Holm-adjusted among themselves (an audit's four layers);
	// every other outcome's become notes, information that raises no alarm.
	// Empty: every outcome is in the family.
	Family []string
}

// inFamily reports whether outcome name's problems are warnings.
func (o Options) inFamily(name string) bool {
	return len(o.Family) == 0 || slices.Contains(o.Family, name)
}

// Headline inference with at least infer.MinTreatedForInterval treated
// clusters (Options.PoissonInference).
const (
	PoissonScoreBootstrap = "score-bootstrap" // Kline & Santos, null imposed, inverted
	PoissonCR1T           = "cr1-t"           // CR1 t ratio against t(H − 1)
)

// DefaultOptions returns the defaults: a window of 12 months before
// and 24 from treatment, 999 bootstrap draws, seed 1, automatic inference,
// placebo shift 6 months.
func DefaultOptions() Options {
	return Options{Window: Window{Pre: 12, Post: 24}, Draws: 999, Seed: 1, Inference: InferenceAuto, PlaceboShift: 6}
}

func (o Options) useBootstrap(treatedClusters int) bool {
	switch o.Inference {
	case InferenceBootstrap:
		return true
	case InferenceAnalytic:
		return false
	}
	return treatedClusters < FewTreatedClusters
}

func (o Options) validate() error {
	switch {
	case o.Window.Pre < 1 || o.Window.Post < 1:
		return fmt.Errorf("audit: event window needs at least 1 month before and after, got %d and %d", o.Window.Pre, o.Window.Post)
	case o.Draws < 99:
		return fmt.Errorf("audit: %d bootstrap draws; use at least 99", o.Draws)
	case o.Inference != InferenceAuto && o.Inference != InferenceAnalytic && o.Inference != InferenceBootstrap:
		return fmt.Errorf("audit: inference %q; want auto, analytic or bootstrap", o.Inference)
	case o.PoissonInference != "" && o.PoissonInference != PoissonScoreBootstrap && o.PoissonInference != PoissonCR1T:
		return fmt.Errorf("audit: poisson inference %q; want %s or %s", o.PoissonInference, PoissonScoreBootstrap, PoissonCR1T)
	case o.PlaceboShift < 0:
		return fmt.Errorf("audit: placebo shift %d months is negative", o.PlaceboShift)
	}
	return nil
}

// Effect is one estimate of how an outcome changed in treated (import) units
// relative to matched controls. CI95 is the 95% interval of RelativeEffect
// when RelativeEffect is set, otherwise of ATT. ATT is in outcome units
// (events per unit-month); RelativeEffect is ATT over the treated units'
// counterfactual mean (post-period treated mean − ATT); for ppml-twfe it is
// exp(b) − 1 and SE is the cluster-robust standard error of b (log points).
// NoInterval is true when the treated clusters are too few for any interval
// to be reliable: CI95 then collapses to the estimate and PValue is the
// randomization test's (Method says which). Null fields were not computed
// (see Note).
type Effect struct {
	Layer          string     `json:"layer"`
	Estimator      string     `json:"estimator"`
	ATT            float64    `json:"att"`
	RelativeEffect *float64   `json:"relative_effect"`
	CI95           [2]float64 `json:"ci95"`
	SE             float64    `json:"se"`
	PValue         float64    `json:"p_value"`
	PreTrendP      *float64   `json:"pre_trend_p"`
	TreatedUnits   int        `json:"treated_units"`
	ControlUnits   int        `json:"control_units"`
	Method         string     `json:"method"`
	NoInterval     bool       `json:"no_interval"`
	Note           string     `json:"note"`
}

// EventStudyRow is one event-time coefficient. Scale says what Estimate and
// CI95 are: ScaleRelative (ppml-twfe: exp(b_e) − 1, SE of b_e in log points)
// or ScaleCount (ATT in outcome units). The reference period −1 is 0 by
// construction and listed with zero interval; a row whose CI95 equals its
// estimate has no band (too few treated clusters).
type EventStudyRow struct {
	Layer     string     `json:"layer"`
	Estimator string     `json:"estimator"`
	Scale     string     `json:"scale"`
	EventTime int        `json:"event_time"`
	Estimate  float64    `json:"estimate"`
	CI95      [2]float64 `json:"ci95"`
	SE        float64    `json:"se"`
}

// PlaceboRow is the cs-att estimate after moving every start date back by
// ShiftMonths into the pre-period, using only months before the real start:
// an effect here signals anticipation or diverging trends.
type PlaceboRow struct {
	Layer       string     `json:"layer"`
	Estimator   string     `json:"estimator"`
	ShiftMonths int        `json:"shift_months"`
	ATT         float64    `json:"att"`
	CI95        [2]float64 `json:"ci95"`
	PValue      float64    `json:"p_value"`
}

// CohortRow is the cs-att effect of one cohort (units first treated in
// Cohort, YYYY-MM), the mean of its group-time ATTs over the post months of
// the window, in outcome units.
type CohortRow struct {
	Layer     string     `json:"layer"`
	Estimator string     `json:"estimator"`
	Cohort    string     `json:"cohort"`
	Units     int        `json:"units"`
	ATT       float64    `json:"att"`
	CI95      [2]float64 `json:"ci95"`
	SE        float64    `json:"se"`
}

// Estimates is the result of Estimate.
type Estimates struct {
	Window     Window          `json:"window"`
	Draws      int             `json:"bootstrap_draws"`
	Seed       uint64          `json:"seed"`
	Effects    []Effect        `json:"effects"`
	EventStudy []EventStudyRow `json:"event_study"`
	ByCohort   []CohortRow     `json:"by_cohort"`
	Placebo    []PlaceboRow    `json:"placebo"`
	Warnings   []string        `json:"warnings"` // problems with the headline estimator
	Notes      []string        `json:"notes"`    // information: robustness checks' own tests and failures
	Cautions   []string        `json:"cautions"`
}

// Cautions printed with every set of estimates.
var estimateCautions = []string{
	"These are observational estimates: matched areas approximate what import areas would have seen; check the pre-trend tests and placebo before reading an effect as caused by an import.",
	"Evidence for a community's review, not a verdict: imports follow the community's import guidelines and local review.",
}

// Headline is the estimator reports lead with. Edit counts are skewed
// counts whose trends are multiplicative (busy areas gain and lose in
// proportion), so a comparison in levels can fail parallel trends where one in
// ratios holds; Poisson pseudo-maximum-likelihood with unit and month fixed
// effects, each cohort stacked with clean controls, estimates the ratio
// directly (Santos Silva & Tenreyro 2006; Wooldridge 1999) and recovers the
// simulator's planted effects (audit's TestAuditRecoversPlantedEffects). The other
// estimators stay in every report as checks.
const Headline = EstimatorPPML
