package sim

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// ErrConfig is the sentinel every configuration error unwraps to.
var ErrConfig = errors.New("sim: invalid configuration")

// ErrOutputExists is returned by Generate when the output folder is not empty
// and force is false.
var ErrOutputExists = errors.New("sim: output folder is not empty")

// Effects holds one multiplier per classifier layer: organic activity in a
// layer of a treated district is multiplied by it after the district's import.
// 1 means no effect; all four 1 is a null world.
type Effects struct {
	Geometry   float64 `json:"geometry"`
	Attribute  float64 `json:"attribute"`
	NewFeature float64 `json:"new_feature"`
	Deletion   float64 `json:"deletion"`
}

// Shares splits the organic activity rate over the layers and provenance-only
// edits. The shares must sum to 1.
type Shares struct {
	Geometry    float64 `json:"geometry"`
	Attribute   float64 `json:"attribute"`
	NewFeature  float64 `json:"new_feature"`
	Deletion    float64 `json:"deletion"`
	Bookkeeping float64 `json:"bookkeeping"`
}

// KeyRate is how often features of a class carry a tag key, for organic and
// for imported features. Neglected reports whether the import rate was set
// lower than the organic one (planted neglect) or equal (a control key).
type KeyRate struct {
	Class   string  `json:"class"` // "building=*" or "amenity=*", "shop=*", "highway=*"
	Key     string  `json:"key"`
	Organic float64 `json:"organic"`
	Import  float64 `json:"import"`
}

// Config describes a simulated world. Build one with DefaultConfig and change
// fields; Validate reports what is wrong before anything is written.
type Config struct {
	Seed uint64 `json:"seed"`

	Cols   int       `json:"cols"`   // districts west to east
	Rows   int       `json:"rows"`   // districts south to north
	Months int       `json:"months"` // study months after the baseline month
	Start  time.Time `json:"start"`  // first study month, UTC, first day of a month

	// Organic activity. MeanActivity is μ, the mean number of edits per
	// district-month at calendar level 1 before Scale; Dispersion is k, the
	// Gamma shape of the district rates (smaller is more heavy-tailed).
	MeanActivity float64 `json:"mean_activity"`
	Dispersion   float64 `json:"dispersion"`
	TrendPerYear float64 `json:"trend_per_year"` // log growth of all activity per year
	Seasonality  float64 `json:"seasonality"`    // amplitude of the yearly log cycle (peak in July)
	Shares       Shares  `json:"shares"`

	// Contributors: an initial pool and newcomers each month; activity weights
	// are Pareto with the given tail index (smaller is heavier).
	Contributors      int     `json:"contributors"`
	NewcomersPerMonth float64 `json:"newcomers_per_month"`
	ActivityTail      float64 `json:"activity_tail"`
	SessionMean       float64 `json:"session_mean"` // mean edits per changeset (session)

	// Baseline stock created in the month before Start, per district, before Scale.
	BaselinePOIs      int `json:"baseline_pois"`
	BaselineBuildings int `json:"baseline_buildings"`
	BaselineRoads     int `json:"baseline_roads"`

	// The import.
	Treated         int       `json:"treated"`            // districts that receive an import
	Waves           int       `json:"waves"`              // staggered cohorts
	LevelSelection  float64   `json:"level_selection"`    // treated drawn with weight λ_d^LevelSelection
	TrendSelection  bool      `json:"trend_selection"`    // treated districts follow a diverging pre-trend
	PreTrendPerYear float64   `json:"pre_trend_per_year"` // log growth per year of treated districts when TrendSelection
	Effects         Effects   `json:"effects"`
	Dynamic         bool      `json:"dynamic"` // effects grow linearly over RampMonths of event time
	RampMonths      int       `json:"ramp_months"`
	ImportAccounts  int       `json:"import_accounts"`
	ImportBuildings int       `json:"import_buildings"` // per treated district, before Scale
	ImportPOIs      int       `json:"import_pois"`      // per treated district, before Scale
	ChangesetLimit  int       `json:"changeset_limit"`  // changes per import changeset (OSM API 0.6 allows 10,000)
	Keys            []KeyRate `json:"keys"`

	// Assignment, when set, fixes the import instead of drawing it: district
	// id → month YYYY-MM of its import (set it with WithAssignment, plan.go).
	Assignment map[int]string `json:"assignment,omitempty"`

	// Retention, when set, adds newcomers who keep to one district, with a
	// planted difference in how long they stay after imports (newcomers.go).
	Retention *Retention `json:"retention,omitempty"`

	// Scale multiplies activity, baseline stock and import sizes.
	Scale float64 `json:"scale"`

	// Region placement: south-west corner and district size in degrees.
	OriginLat float64 `json:"origin_lat"`
	OriginLon float64 `json:"origin_lon"`
	CellDeg   float64 `json:"cell_deg"`
}

// APIChangesetLimit is the most changes the OSM API 0.6 accepts in one
// changeset (OSM wiki, "API v0.6", capabilities: changesets maximum_elements).
const APIChangesetLimit = 10000

// DefaultConfig returns a world sized for tests: 8×8 districts, 48 months,
// 16 treated districts in 4 cohorts, some 200,000 versions.
func DefaultConfig() Config {
	return Config{
		Seed:              1,
		Cols:              8,
		Rows:              8,
		Months:            48,
		Start:             time.Date(2019, time.January, 1, 0, 0, 0, 0, time.UTC),
		MeanActivity:      24,
		Dispersion:        2,
		TrendPerYear:      0.05,
		Seasonality:       0.15,
		Shares:            Shares{Geometry: 0.35, Attribute: 0.33, NewFeature: 0.15, Deletion: 0.05, Bookkeeping: 0.12},
		Contributors:      150,
		NewcomersPerMonth: 6,
		ActivityTail:      1.2,
		SessionMean:       4,
		BaselinePOIs:      25,
		BaselineBuildings: 60,
		BaselineRoads:     10,
		Treated:           16,
		Waves:             4,
		LevelSelection:    1,
		PreTrendPerYear:   0.25,
		Effects:           Effects{Geometry: 1.0, Attribute: 0.7, NewFeature: 1.2, Deletion: 1.0},
		RampMonths:        12,
		ImportAccounts:    2,
		ImportBuildings:   320,
		ImportPOIs:        30,
		ChangesetLimit:    2000,
		Keys: []KeyRate{
			{Class: "building=*", Key: "building:levels", Organic: 0.55, Import: 0.05},
			{Class: "building=*", Key: "addr:housenumber", Organic: 0.65, Import: 0.25},
			{Class: "building=*", Key: "addr:street", Organic: 0.6, Import: 0.6},
			{Class: "building=*", Key: "roof:shape", Organic: 0.3, Import: 0.3},
			{Class: "amenity=*", Key: "opening_hours", Organic: 0.5, Import: 0.1},
			{Class: "amenity=*", Key: "name", Organic: 0.85, Import: 0.85},
			{Class: "shop=*", Key: "opening_hours", Organic: 0.6, Import: 0.6},
			{Class: "shop=*", Key: "name", Organic: 0.9, Import: 0.9},
		},
		Scale:     1,
		OriginLat: 47.70,
		OriginLon: -86.70,
		CellDeg:   0.01,
	}
}

// Districts returns the number of districts, Cols×Rows.
func (c Config) Districts() int { return c.Cols * c.Rows }

// Validate reports the first problem with c, wrapping ErrConfig.
func (c Config) Validate() error {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: %s", ErrConfig, fmt.Sprintf(format, args...))
	}
	finite := func(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
	switch {
	case c.Cols < 1 || c.Rows < 1:
		return bad("the grid needs at least 1×1 districts, got %d×%d", c.Cols, c.Rows)
	case c.Cols*c.Rows > 1_000_000:
		return bad("%d×%d districts is more than 1,000,000", c.Cols, c.Rows)
	case c.Months < 1:
		return bad("months must be at least 1, got %d", c.Months)
	case c.Months > 1200:
		return bad("months must be at most 1200, got %d", c.Months)
	case c.Start.IsZero() || c.Start.Location() != time.UTC || c.Start.Day() != 1 ||
		c.Start.Hour() != 0 || c.Start.Minute() != 0 || c.Start.Second() != 0 || c.Start.Nanosecond() != 0:
		return bad("start must be the first instant of a month in UTC, got %v", c.Start)
	case c.Start.Year() < 2006 || c.Start.AddDate(0, c.Months+1, 0).Year() >= 2130:
		return bad("the months from %s must lie between 2006 and 2129", c.Start.Format("2006-01"))
	case !finite(c.MeanActivity) || c.MeanActivity <= 0:
		return bad("mean activity must be positive, got %v", c.MeanActivity)
	case !finite(c.Dispersion) || c.Dispersion <= 0:
		return bad("dispersion must be positive, got %v", c.Dispersion)
	case !finite(c.TrendPerYear) || !finite(c.Seasonality) || !finite(c.PreTrendPerYear):
		return bad("trend, seasonality and pre-trend must be finite numbers")
	case c.Seasonality < 0 || c.Seasonality >= 1:
		return bad("seasonality must be in [0, 1), got %v", c.Seasonality)
	case c.Contributors < 1:
		return bad("at least 1 contributor is needed, got %d", c.Contributors)
	case !finite(c.NewcomersPerMonth) || c.NewcomersPerMonth < 0:
		return bad("newcomers per month must not be negative, got %v", c.NewcomersPerMonth)
	case !finite(c.ActivityTail) || c.ActivityTail <= 0:
		return bad("activity tail index must be positive, got %v", c.ActivityTail)
	case !finite(c.SessionMean) || c.SessionMean < 1 || c.SessionMean > 50:
		return bad("session mean must be in [1, 50], got %v", c.SessionMean)
	case c.BaselinePOIs < 0 || c.BaselineBuildings < 0 || c.BaselineRoads < 0:
		return bad("baseline stock must not be negative")
	case c.Treated < 0:
		return bad("treated districts must not be negative, got %d", c.Treated)
	case c.Treated > c.Districts():
		return bad("%d treated districts but the grid has only %d", c.Treated, c.Districts())
	case c.Treated > 0 && c.Months < 2:
		return bad("a world with treated districts needs at least 2 months, got %d", c.Months)
	case c.Treated > 0 && (c.Waves < 1 || c.Waves > c.Treated):
		return bad("waves must be between 1 and the %d treated districts, got %d", c.Treated, c.Waves)
	case c.Treated > 0 && c.Waves > c.Months-1:
		return bad("%d waves need at least %d months, got %d", c.Waves, c.Waves+1, c.Months)
	case !finite(c.LevelSelection):
		return bad("level selection must be a finite number")
	case c.Dynamic && c.RampMonths < 1:
		return bad("dynamic effects need ramp months of at least 1, got %d", c.RampMonths)
	case c.Treated > 0 && c.ImportAccounts < 1:
		return bad("an import needs at least 1 import account")
	case c.ImportBuildings < 0 || c.ImportPOIs < 0:
		return bad("import sizes must not be negative")
	case c.ChangesetLimit < 10 || c.ChangesetLimit > APIChangesetLimit:
		return bad("changeset limit must be in [10, %d] (OSM API 0.6), got %d", APIChangesetLimit, c.ChangesetLimit)
	case !finite(c.Scale) || c.Scale <= 0 || c.Scale > 10000:
		return bad("scale must be in (0, 10000], got %v", c.Scale)
	case !finite(c.OriginLat) || !finite(c.OriginLon) || !finite(c.CellDeg) || c.CellDeg <= 0 || c.CellDeg > 1:
		return bad("origin and cell size must be finite, cell size in (0, 1] degrees")
	case c.OriginLat < -85 || c.OriginLat+float64(c.Rows)*c.CellDeg > 85 ||
		c.OriginLon < -180 || c.OriginLon+float64(c.Cols)*c.CellDeg > 180:
		return bad("the grid leaves the valid latitude/longitude range")
	}
	for _, e := range []struct {
		name string
		v    float64
	}{{"geometry", c.Effects.Geometry}, {"attribute", c.Effects.Attribute},
		{"new_feature", c.Effects.NewFeature}, {"deletion", c.Effects.Deletion}} {
		if !finite(e.v) || e.v < 0 || e.v > 100 {
			return bad("effect multiplier for %s must be in [0, 100], got %v", e.name, e.v)
		}
	}
	s := c.Shares
	for _, v := range []float64{s.Geometry, s.Attribute, s.NewFeature, s.Deletion, s.Bookkeeping} {
		if !finite(v) || v < 0 {
			return bad("layer shares must not be negative")
		}
	}
	if sum := s.Geometry + s.Attribute + s.NewFeature + s.Deletion + s.Bookkeeping; math.Abs(sum-1) > 1e-9 {
		return bad("layer shares must sum to 1, got %v", sum)
	}
	if err := c.validateAssignment(); err != nil {
		return err
	}
	if c.Retention != nil {
		if err := c.Retention.validate(); err != nil {
			return err
		}
	}
	seen := map[[2]string]bool{}
	for _, k := range c.Keys {
		switch k.Class {
		case "building=*", "amenity=*", "shop=*", "highway=*":
		default:
			return bad("key rate class %q is not one of building=*, amenity=*, shop=*, highway=*", k.Class)
		}
		if _, ok := keyCode(k.Key); !ok {
			return bad("key rate key %q is not one the simulator writes", k.Key)
		}
		if !finite(k.Organic) || !finite(k.Import) || k.Organic < 0 || k.Organic > 1 || k.Import < 0 || k.Import > 1 {
			return bad("key rates for %s %s must be in [0, 1]", k.Class, k.Key)
		}
		if seen[[2]string{k.Class, k.Key}] {
			return bad("key rate for %s %s given twice", k.Class, k.Key)
		}
		seen[[2]string{k.Class, k.Key}] = true
	}
	return nil
}
