package panel

import (
	"errors"
	"fmt"
	"math"
	"time"
)

// Panel is a balanced unit-by-month panel of outcome counts, the input of
// Estimate. The panel builder fills it from the store; ReadCSV reads one a
// user brings. Months run from Start (the first day of a UTC month) for Months
// calendar months.
type Panel struct {
	Start    time.Time   // first month, UTC, day 1
	Months   int         // number of months
	Units    []Unit      // spatial units, treated and control
	Outcomes []string    // outcome names: layers ("geometry", ...) or finer ("attribute:names", "newcomers")
	Y        [][]float64 // Y[o][u*Months+t]: count of outcome o in unit u, month t (>= 0)
	// CovariateNames names the units' Covariates, in order (optional; the CSV
	// export numbers unnamed ones).
	CovariateNames []string
}

// Unit is one spatial unit of a Panel.
type Unit struct {
	ID           string    // unit identifier, unique in the panel
	FirstTreated int       // month index of the first treated month; -1 never treated
	Weight       float64   // matching weight: 1 for treated, > 0 for controls; 0 excludes the unit
	Cluster      string    // cluster for inference; empty means the unit's own ID
	Covariates   []float64 // pre-period covariates for the doubly robust estimator; same length for every unit or none
	Intensity    float64   // treatment intensity (e.g. imported features per km²); informational
}

// ErrInvalid is the sentinel under every panel validation error.
var ErrInvalid = errors.New("panel: invalid panel")

// Treated reports whether the unit is ever treated inside the panel.
func (u Unit) Treated() bool { return u.FirstTreated >= 0 }

// cluster returns the unit's cluster id, defaulting to its ID.
func (u Unit) cluster() string {
	if u.Cluster == "" {
		return u.ID
	}
	return u.Cluster
}

// MonthTime returns the first instant of month index t.
func (p *Panel) MonthTime(t int) time.Time { return p.Start.AddDate(0, t, 0) }

// MonthIndex returns the month index of the month holding at, which may lie
// outside [0, Months).
func (p *Panel) MonthIndex(at time.Time) int {
	at = at.UTC()
	return (at.Year()-p.Start.Year())*12 + int(at.Month()) - int(p.Start.Month())
}

// Validate checks the panel's shape and values: sizes agree, counts are finite
// and non-negative, weights are finite and non-negative, treatment months lie
// inside the panel, and covariates have one length.
func (p *Panel) Validate() error {
	if p == nil {
		return fmt.Errorf("%w: nil panel", ErrInvalid)
	}
	if p.Months < 2 {
		return fmt.Errorf("%w: %d months, need at least 2", ErrInvalid, p.Months)
	}
	if len(p.Units) == 0 {
		return fmt.Errorf("%w: no units", ErrInvalid)
	}
	if len(p.Y) != len(p.Outcomes) {
		return fmt.Errorf("%w: %d outcome names but %d outcome arrays", ErrInvalid, len(p.Outcomes), len(p.Y))
	}
	ids := make(map[string]bool, len(p.Units))
	ncov := -1
	for i, u := range p.Units {
		if ids[u.ID] {
			return fmt.Errorf("%w: unit %q appears twice", ErrInvalid, u.ID)
		}
		ids[u.ID] = true
		if u.FirstTreated < -1 || u.FirstTreated >= p.Months {
			return fmt.Errorf("%w: unit %q: first treated month %d outside 0..%d (or -1)", ErrInvalid, u.ID, u.FirstTreated, p.Months-1)
		}
		if math.IsNaN(u.Weight) || math.IsInf(u.Weight, 0) || u.Weight < 0 {
			return fmt.Errorf("%w: unit %q: weight %v must be finite and >= 0", ErrInvalid, u.ID, u.Weight)
		}
		if i == 0 {
			ncov = len(u.Covariates)
		} else if len(u.Covariates) != ncov {
			return fmt.Errorf("%w: unit %q has %d covariates, unit %q has %d", ErrInvalid, u.ID, len(u.Covariates), p.Units[0].ID, ncov)
		}
		for _, c := range u.Covariates {
			if math.IsNaN(c) || math.IsInf(c, 0) {
				return fmt.Errorf("%w: unit %q: covariate %v not finite", ErrInvalid, u.ID, c)
			}
		}
	}
	n := len(p.Units) * p.Months
	for o, y := range p.Y {
		if len(y) != n {
			return fmt.Errorf("%w: outcome %q has %d values, want %d units x %d months", ErrInvalid, p.Outcomes[o], len(y), len(p.Units), p.Months)
		}
		for i, v := range y {
			if math.IsNaN(v) || math.IsInf(v, 0) || v < 0 {
				return fmt.Errorf("%w: outcome %q, unit %q, month %d: value %v must be a finite count >= 0",
					ErrInvalid, p.Outcomes[o], p.Units[i/p.Months].ID, i%p.Months, v)
			}
		}
	}
	return nil
}

// ClusterIndex maps each unit to a dense cluster index and returns the number
// of clusters. Units with zero weight still get an index; callers skip them.
func (p *Panel) ClusterIndex() ([]int, int) {
	idx := make([]int, len(p.Units))
	seen := make(map[string]int)
	for i, u := range p.Units {
		c := u.cluster()
		k, ok := seen[c]
		if !ok {
			k = len(seen)
			seen[c] = k
		}
		idx[i] = k
	}
	return idx, len(seen)
}
