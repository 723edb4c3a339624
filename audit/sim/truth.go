package sim

// Truth is what Generate planted and counted, written to truth.json.
type Truth struct {
	Generator string `json:"generator"`
	Region    Region `json:"region"`
	Config    Config `json:"config"`

	// Months are the study months "YYYY-MM"; Baseline is the month before them
	// in which the initial stock of features was mapped.
	Months   []string  `json:"months"`
	Baseline string    `json:"baseline_month"`
	Calendar []float64 `json:"calendar"` // shared activity multiplier per study month

	Effects        Effects `json:"effects"`
	Dynamic        bool    `json:"dynamic"`
	RampMonths     int     `json:"ramp_months,omitempty"`
	TrendSelection bool    `json:"trend_selection"`

	Districts        []District   `json:"districts"`
	Cohorts          []Cohort     `json:"cohorts"`
	ImportAccounts   []Account    `json:"import_accounts"`
	ImportChangesets []int64      `json:"import_changesets"`
	Keys             []PlantedKey `json:"keys"`
	Tallies          Tallies      `json:"tallies"`
}

// Region places the invented region.
type Region struct {
	Name      string  `json:"name"`
	Note      string  `json:"note"`
	OriginLat float64 `json:"origin_lat"`
	OriginLon float64 `json:"origin_lon"`
	CellDeg   float64 `json:"cell_deg"`
}

// District is one grid cell. ID matches the id property in districts.geojson.
type District struct {
	ID   int     `json:"id"`
	Name string  `json:"name"`
	Col  int     `json:"col"`
	Row  int     `json:"row"`
	Rate float64 `json:"rate"` // λ_d: expected organic edits per month at calendar level 1, Scale applied
	// Cohort is the wave (1-based) of a treated district, 0 for untreated.
	Cohort int    `json:"cohort"`
	Start  string `json:"start,omitempty"` // first month of the import, "YYYY-MM"
	// StartIndex is the study-month index of Start, -1 for untreated.
	StartIndex int `json:"start_index"`
}

// Cohort is one wave of the staggered import.
type Cohort struct {
	Wave       int    `json:"wave"`
	Start      string `json:"start"`
	StartIndex int    `json:"start_index"`
	Districts  []int  `json:"districts"`
}

// Account is an import account.
type Account struct {
	UID       int    `json:"uid"`
	User      string `json:"user"`
	Agency    string `json:"agency"`
	Dataset   string `json:"dataset"`
	Districts []int  `json:"districts"`
}

// PlantedKey is a configured key rate with what it plants: "neglected" when
// imports carry the key less often than organic features, "equal" when as
// often, "more" when more often.
type PlantedKey struct {
	KeyRate
	Planted string `json:"planted"`
}

// LayerCounts counts events per layer, bookkeeping apart.
type LayerCounts struct {
	Geometry    int64 `json:"geometry"`
	Attribute   int64 `json:"attribute"`
	NewFeature  int64 `json:"new_feature"`
	Deletion    int64 `json:"deletion"`
	Bookkeeping int64 `json:"bookkeeping"`
}

// Total is the sum over the four layers and bookkeeping.
func (c LayerCounts) Total() int64 {
	return c.Geometry + c.Attribute + c.NewFeature + c.Deletion + c.Bookkeeping
}

func (c *LayerCounts) add(l layer, n int64) {
	switch l {
	case layerGeometry:
		c.Geometry += n
	case layerAttribute:
		c.Attribute += n
	case layerNewFeature:
		c.NewFeature += n
	case layerDeletion:
		c.Deletion += n
	case layerBookkeeping:
		c.Bookkeeping += n
	}
}

// Monthly holds event counts per district and study month: X[d][m] for the
// district with ID d+1 and Months[m].
type Monthly struct {
	Geometry    [][]int64 `json:"geometry"`
	Attribute   [][]int64 `json:"attribute"`
	NewFeature  [][]int64 `json:"new_feature"`
	Deletion    [][]int64 `json:"deletion"`
	Bookkeeping [][]int64 `json:"bookkeeping"`
}

// Layer returns the matrix of layer name ("geometry", ..., "bookkeeping"), nil if unknown.
func (m *Monthly) Layer(name string) [][]int64 {
	switch name {
	case "geometry":
		return m.Geometry
	case "attribute":
		return m.Attribute
	case "new_feature":
		return m.NewFeature
	case "deletion":
		return m.Deletion
	case "bookkeeping":
		return m.Bookkeeping
	}
	return nil
}

// Tallies are the generator's own counts, made the way the classifier counts
// (layers.Event): one event per edit, in exactly one layer.
type Tallies struct {
	NodeVersions     int64 `json:"node_versions"`
	WayVersions      int64 `json:"way_versions"`
	RelationVersions int64 `json:"relation_versions"`
	Nodes            int64 `json:"nodes"` // distinct objects
	Ways             int64 `json:"ways"`
	Changesets       int64 `json:"changesets"`

	Organic  LayerCounts `json:"organic"`  // every organic event, baseline month included
	Baseline LayerCounts `json:"baseline"` // the part of Organic made in the baseline month
	Import   LayerCounts `json:"import"`   // events in import changesets
	// ImportVersions counts the versions written by import changesets.
	ImportVersions int64 `json:"import_versions"`
	// Skipped counts planned organic edits not made because the district had
	// no object to make them on.
	Skipped int64 `json:"skipped"`
	// Monthly splits the organic study-month events by district and month; it
	// is left out when districts × months exceeds MonthlyLimit.
	Monthly *Monthly `json:"monthly,omitempty"`
}

// MonthlyLimit is the most district-months for which Tallies.Monthly is written.
const MonthlyLimit = 50_000
