package retention

// Result is the retention section of the audit JSON: figures about groups
// of newcomers in areas, never about a person (no account names or ids).
type Result struct {
	Definition string   `json:"definition"` // who counts as a newcomer, in plain words
	Horizons   []int    `json:"horizons"`   // months
	GapMonths  int      `json:"gap_months"` // months without edits before the data end that count as stopped
	DataEnd    string   `json:"data_end"`   // YYYY-MM-DD of the store's last edit
	Cohorts    []string `json:"cohorts"`    // YYYY-MM of each cohort's start
	Groups     []Group  `json:"groups"`     // import/comparison areas × before/after
	// Retention12 is the difference-in-differences of the share still
	// editing 12 months on: (import after − import before) − (comparison
	// after − comparison before), in share points.
	Retention12 Effect `json:"retention_12m_did"`
	// FirstYearEdits is the same difference for the mean edits in the first
	// year.
	FirstYearEdits Effect `json:"first_year_edits_did"`
	// HazardRatio is exp(b) of the import-area-after term of a Cox model of
	// the time to stopping (import area, after, and their product), baseline
	// per cohort, robust SE clustered by unit: above 1 means newcomers in
	// import areas after the import stopped sooner than the comparison
	// suggests.
	HazardRatio HazardRatio `json:"hazard_ratio"`
	// LogRank compares newcomers after the import in import and comparison
	// areas, stratified by cohort.
	LogRank  LogRankTest  `json:"log_rank"`
	Curves   []CurvePoint `json:"curves"` // Kaplan–Meier per group, monthly to 24 months
	Notes    []string     `json:"notes"`
	Cautions []string     `json:"cautions"`
}

// Group is one cell of the comparison.
type Group struct {
	Areas     string  `json:"areas"`  // "import" or "comparison"
	Period    string  `json:"period"` // "before" or "after"
	Units     int     `json:"units"`  // units with at least one newcomer in the cell
	Newcomers int     `json:"newcomers"`
	Stopped   int     `json:"stopped"`
	Retention []Share `json:"retention"` // per horizon
	// FirstYearEdits is the mean edits in the first year among newcomers
	// followed for a year (FollowedYear of them); median too.
	FirstYearEdits       float64 `json:"first_year_edits_mean"`
	FirstYearEditsMedian float64 `json:"first_year_edits_median"`
	FollowedYear         int     `json:"followed_year"`
}

// Share is the retention of a group at one horizon.
type Share struct {
	Months   int        `json:"months"`
	Followed int        `json:"followed"` // newcomers whose first edit is at least Months before the data end
	Retained int        `json:"retained"`
	Share    float64    `json:"share"` // Retained / Followed; 0 when none followed
	CI95     [2]float64 `json:"ci95"`  // Wilson interval (ignores clustering by unit: descriptive)
	// KM is the Kaplan–Meier survival at Months (censored newcomers
	// included), KMCI95 its log-log 95% band.
	KM     float64    `json:"km"`
	KMCI95 [2]float64 `json:"km_ci95"`
}

// Effect is a difference-in-differences with its interval.
type Effect struct {
	Estimate   float64    `json:"estimate"`
	CI95       [2]float64 `json:"ci95"` // percentile interval of the cluster bootstrap (equal to Estimate when NoInterval)
	SE         float64    `json:"se"`   // standard deviation of the bootstrap draws
	Method     string     `json:"method"`
	NoInterval bool       `json:"no_interval"` // too few units for a reliable interval
	Computed   bool       `json:"computed"`    // false when a group had no newcomer followed long enough
	Draws      int        `json:"draws"`
}

// HazardRatio is a Cox model's ratio with its interval.
type HazardRatio struct {
	Estimate float64    `json:"estimate"`
	CI95     [2]float64 `json:"ci95"`
	P        float64    `json:"p_value"`
	Method   string     `json:"method"`
	Computed bool       `json:"computed"`
	Note     string     `json:"note,omitempty"`
}

// LogRankTest is the log-rank comparison.
type LogRankTest struct {
	ChiSq    float64    `json:"chi_square"`
	P        float64    `json:"p_value"`
	Observed [2]float64 `json:"observed"` // stopped: comparison, import areas
	Expected [2]float64 `json:"expected"`
	Computed bool       `json:"computed"`
}

// CurvePoint is one month of a group's Kaplan–Meier curve.
type CurvePoint struct {
	Areas  string     `json:"areas"`
	Period string     `json:"period"`
	Month  int        `json:"month"`
	Surv   float64    `json:"surv"`
	CI95   [2]float64 `json:"ci95"`
	NRisk  int        `json:"n_risk"`
}

// Cautions close the retention section.
func Cautions() []string {
	return []string{
		"These figures describe groups of accounts that started editing in areas, never a person; they name no account.",
		"Newcomers choose where they start: an import may draw different people to an area rather than change how long the same people stay. A difference here is a reason to look closer with the local community, not proof that an import drove anyone away.",
		"Stopping is read from the last edit in this store: an account that moved on to edit elsewhere, outside the store's area, counts as stopped.",
	}
}
