package sim

import (
	"fmt"
	"maps"
	"slices"
	"time"

	"github.com/paulmach/orb"
)

// WithAssignment returns c with its import following a given assignment:
// district id (1-based, row-major from the south-west as in
// districts.geojson) → month YYYY-MM of the district's import. Treated and
// Waves are set to the number of districts and of distinct months, a cohort
// per month in calendar order. The treated districts are then not drawn, so
// the random stream of the organic activity is that of a world without an
// import up to the first assigned month: the same seed gives the same
// history until the import begins. Validate checks the assignment.
func (c Config) WithAssignment(a map[int]string) Config {
	c.Assignment = maps.Clone(a)
	months := map[string]bool{}
	for _, m := range a {
		months[m] = true
	}
	c.Treated, c.Waves = len(a), len(months)
	return c
}

// validateAssignment checks Assignment against the grid and the study
// months; nil is no assignment.
func (c Config) validateAssignment() error {
	if c.Assignment == nil {
		return nil
	}
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: assignment: %s", ErrConfig, fmt.Sprintf(format, args...))
	}
	if len(c.Assignment) == 0 {
		return bad("no district is assigned (leave the assignment out for a world without an import)")
	}
	months := map[string]bool{}
	for _, id := range slices.Sorted(maps.Keys(c.Assignment)) {
		m := c.Assignment[id]
		if id < 1 || id > c.Districts() {
			return bad("district %d is not on the %d×%d grid (ids 1 to %d)", id, c.Cols, c.Rows, c.Districts())
		}
		i, err := c.MonthIndex(m)
		if err != nil {
			return bad("district %d: %v", id, err)
		}
		if i < 1 || i >= c.Months {
			return bad("district %d: month %s is outside %s to %s (the import needs a study month before it)",
				id, m, monthLabel(c, 1), monthLabel(c, c.Months-1))
		}
		months[m] = true
	}
	if c.Treated != len(c.Assignment) || c.Waves != len(months) {
		return bad("%d districts in %d months, but treated %d and waves %d (set it with WithAssignment)",
			len(c.Assignment), len(months), c.Treated, c.Waves)
	}
	return nil
}

// MonthIndex returns the study-month index of a month YYYY-MM: 0 is Start,
// -1 the baseline month before it.
func (c Config) MonthIndex(m string) (int, error) {
	t, err := time.Parse("2006-01", m)
	if err != nil {
		return 0, fmt.Errorf("month %q: want YYYY-MM", m)
	}
	return (t.Year()-c.Start.Year())*12 + int(t.Month()) - int(c.Start.Month()), nil
}

// assignCohorts marks the assigned districts as treated, a cohort per
// distinct month in calendar order, and records the cohorts in the truth.
func (g *gen) assignCohorts() {
	byMonth := map[int][]int{}
	for id, m := range g.cfg.Assignment {
		i, _ := g.cfg.MonthIndex(m) // checked by Validate
		byMonth[i] = append(byMonth[i], id)
	}
	for wv, start := range slices.Sorted(maps.Keys(byMonth)) {
		ids := byMonth[start]
		slices.Sort(ids)
		for _, id := range ids {
			d := &g.districts[id-1]
			d.start, d.cohort = start, wv+1
		}
		g.truth.Cohorts = append(g.truth.Cohorts, Cohort{Wave: wv + 1, Start: monthLabel(g.cfg, start), StartIndex: start, Districts: ids})
	}
}

// DistrictBound returns the bounds of district id (1-based) as
// districts.geojson writes them.
func (c Config) DistrictBound(id int) orb.Bound {
	col, row := (id-1)%c.Cols, (id-1)/c.Cols
	s, w := e7(c.OriginLat+float64(row)*c.CellDeg), e7(c.OriginLon+float64(col)*c.CellDeg)
	return orb.Bound{Min: orb.Point{float64(w) * 1e-7, float64(s) * 1e-7},
		Max: orb.Point{float64(w+e7(c.CellDeg)) * 1e-7, float64(s+e7(c.CellDeg)) * 1e-7}}
}
