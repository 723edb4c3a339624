package retention

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/survival"
)

// MinUnits is the fewest import areas, and comparison areas, for which the
// cluster bootstrap's interval is given; below it the interval is withheld
// (NoInterval), as the audit withholds the headline's.
const MinUnits = 4

// cellKey indexes the sums of one cohort, unit and period.
type cellKey struct {
	cohort, unit int
	after        bool
}

// cellSums are what the difference-in-differences needs of a cell.
type cellSums struct {
	followed, retained float64 // at 12 months
	fyN, fySum         float64 // first-year edits
}

// design is the sample's clusters and cell sums.
type design struct {
	s                 *Sample
	cells             map[cellKey]cellSums
	treated, controls [][][2]cellSums // by cohort, unit, period (dense)
}

// dense lays the cell sums out per cohort: treated[c][i][after] for the
// cohort's i-th import area, controls[c][i][after] for the i-th comparison
// area, so a bootstrap draw reads no map.
func (d *design) dense() {
	d.treated = make([][][2]cellSums, len(d.s.Treated))
	d.controls = make([][][2]cellSums, len(d.s.Treated))
	for c, units := range d.s.Treated {
		for _, u := range units {
			d.treated[c] = append(d.treated[c], [2]cellSums{d.cells[cellKey{c, u, false}], d.cells[cellKey{c, u, true}]})
		}
		for _, u := range d.s.Controls {
			d.controls[c] = append(d.controls[c], [2]cellSums{d.cells[cellKey{c, u, false}], d.cells[cellKey{c, u, true}]})
		}
	}
}

func (d *design) did(mt [][]float64, mc []float64, fy bool) (float64, bool) {
	num, den := 0.0, 0.0
	for c, units := range d.s.Treated {
		var t, k [2][2]float64 // [after][num, den]
		for i, v := range d.treated[c] {
			for a := 0; a < 2; a++ {
				t[a] = add(t[a], v[a], mt[c][i], fy)
			}
		}
		for i, v := range d.controls[c] {
			for a := 0; a < 2; a++ {
				k[a] = add(k[a], v[a], mc[i], fy)
			}
		}
		if t[0][1] == 0 || t[1][1] == 0 || k[0][1] == 0 || k[1][1] == 0 {
			continue
		}
		dd := (t[1][0]/t[1][1] - t[0][0]/t[0][1]) - (k[1][0]/k[1][1] - k[0][0]/k[0][1])
		w := float64(len(units))
		num += w * dd
		den += w
	}
	if den == 0 {
		return 0, false
	}
	return num / den, true
}

func add(acc [2]float64, v cellSums, m float64, fy bool) [2]float64 {
	if fy {
		return [2]float64{acc[0] + m*v.fySum, acc[1] + m*v.fyN}
	}
	return [2]float64{acc[0] + m*v.retained, acc[1] + m*v.followed}
}

// Estimate computes the retention section from a sample.
func Estimate(ctx context.Context, s *Sample, opts Options) (*Result, error) {
	opts = opts.withDefaults()
	if s == nil || len(s.Cohorts) == 0 {
		return nil, fmt.Errorf("%w: no cohorts", ErrRetention)
	}
	h := Horizons()
	r := &Result{
		Definition: fmt.Sprintf("a newcomer is an account counted once, at its first edit, in the area of its first edit with a location inside a study area; it started in the import area or a matched comparison area within %d months before or %d months after the import reached that import area (import accounts and accounts whose first edit was part of an import are left out). Stopped: no edit in the last %d months before the data end.", opts.Before, opts.After, opts.Gap),
		Horizons:   h[:],
		GapMonths:  opts.Gap,
		DataEnd:    s.DataEnd.Format("2006-01-02"),
		Cohorts:    s.Cohorts,
		Groups:     []Group{},
		Curves:     []CurvePoint{},
		Notes:      []string{},
		Cautions:   Cautions(),
	}
	if len(s.Cohorts) > 1 {
		r.Notes = append(r.Notes, fmt.Sprintf("the import reached its areas in %d waves; each wave's import areas are compared with all comparison areas around the wave's own start, so a comparison-area newcomer can count in more than one wave's comparison (the group figures pool the waves)", len(s.Cohorts)))
	}
	if s.ImportAccounts > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("%d accounts whose first edit was part of an import are not counted as newcomers", s.ImportAccounts))
	}
	if s.Elsewhere > 0 {
		r.Notes = append(r.Notes, fmt.Sprintf("%d accounts started in areas outside the comparison (unmatched, excluded or dropped areas) and are not counted", s.Elsewhere))
	}
	for _, areas := range []bool{true, false} {
		for _, after := range []bool{false, true} {
			g, pts, err := group(s, areas, after)
			if err != nil {
				return nil, err
			}
			r.Groups = append(r.Groups, g)
			r.Curves = append(r.Curves, pts...)
		}
	}
	d := &design{s: s, cells: map[cellKey]cellSums{}}
	for _, n := range s.Newcomers {
		k := cellKey{n.Cohort, n.Unit, n.After}
		v := d.cells[k]
		if n.Retained[year] >= 0 {
			v.followed++
			v.retained += float64(n.Retained[year])
		}
		if n.FirstYearEdits >= 0 {
			v.fyN++
			v.fySum += float64(n.FirstYearEdits)
		}
		d.cells[k] = v
	}
	d.dense()
	var err error
	if r.Retention12, r.FirstYearEdits, err = d.bootstrap(ctx, opts); err != nil {
		return nil, err
	}
	if r.Retention12.NoInterval {
		r.Notes = append(r.Notes, fmt.Sprintf("fewer than %d import areas or comparison areas: no interval for the differences is reliable, only the estimates are given", MinUnits))
	}
	if !r.Retention12.Computed {
		r.Notes = append(r.Notes, "no wave had newcomers followed for 12 months in all four groups: the 12-month difference is not computed")
	}
	r.HazardRatio = hazardRatio(ctx, s)
	r.LogRank = logRank(s)
	return r, nil
}

// bootstrap resamples units with replacement — import areas within their
// cohort, comparison areas from all — and recomputes both differences.
func (d *design) bootstrap(ctx context.Context, opts Options) (Effect, Effect, error) {
	s := d.s
	ones := func() ([][]float64, []float64) {
		mt := make([][]float64, len(s.Treated))
		for c, u := range s.Treated {
			mt[c] = make([]float64, len(u))
			for i := range mt[c] {
				mt[c][i] = 1
			}
		}
		mc := make([]float64, len(s.Controls))
		for i := range mc {
			mc[i] = 1
		}
		return mt, mc
	}
	method := fmt.Sprintf("cluster bootstrap by unit (import areas resampled within their wave, comparison areas from all), %d draws; standard error from the draws scaled by G/(G-1), interval from Student's t on G-1 degrees of freedom, G the import areas", opts.Draws)
	mk := func(fy bool) Effect {
		mt, mc := ones()
		est, ok := d.did(mt, mc, fy)
		return Effect{Estimate: est, Computed: ok, Method: method, Draws: opts.Draws, CI95: [2]float64{est, est}}
	}
	ret, fy := mk(false), mk(true)
	nt := 0
	for _, u := range s.Treated {
		nt += len(u)
	}
	if nt < MinUnits || len(s.Controls) < MinUnits {
		ret.NoInterval, fy.NoInterval = true, true
		return ret, fy, nil
	}
	rng := rand.New(rand.NewPCG(opts.Seed, 0x7265746e))
	var dr, df []float64
	mt, mc := ones()
	for b := 0; b < opts.Draws; b++ {
		if b%64 == 0 {
			if err := ctx.Err(); err != nil {
				return ret, fy, err
			}
		}
		for c := range mt {
			clear(mt[c])
			for range mt[c] {
				mt[c][rng.IntN(len(mt[c]))]++
			}
		}
		clear(mc)
		for range mc {
			mc[rng.IntN(len(mc))]++
		}
		if v, ok := d.did(mt, mc, false); ok {
			dr = append(dr, v)
		}
		if v, ok := d.did(mt, mc, true); ok {
			df = append(df, v)
		}
	}
	// Few import areas make the bootstrap's spread too small and its
	// percentiles too narrow: the SE is scaled by G/(G−1) and the interval
	// uses Student's t on G−1 degrees of freedom, G the import areas
	// (Cameron, Gelbach & Miller 2008, section IV; Bester, Conley & Hansen
	// 2011). Checked by simulation in mc_validate_test.go.
	g := float64(nt)
	tq := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: g - 1}.Quantile(0.975)
	set := func(e *Effect, draws []float64) {
		if !e.Computed || len(draws) < opts.Draws/2 {
			e.NoInterval = true
			return
		}
		e.SE = stat.StdDev(draws, nil) * math.Sqrt(g/(g-1))
		e.CI95 = [2]float64{e.Estimate - tq*e.SE, e.Estimate + tq*e.SE}
	}
	set(&ret, dr)
	set(&fy, df)
	return ret, fy, nil
}

func areaWord(treated bool) string {
	if treated {
		return "import"
	}
	return "comparison"
}

func periodWord(after bool) string {
	if after {
		return "after"
	}
	return "before"
}

// group summarizes one cell, waves pooled.
func group(s *Sample, treated, after bool) (Group, []CurvePoint, error) {
	g := Group{Areas: areaWord(treated), Period: periodWord(after), Retention: []Share{}}
	var times, fy []float64
	var events []bool
	units := map[int]bool{}
	h := Horizons()
	followed, retained := make([]int, len(h)), make([]int, len(h))
	for _, n := range s.Newcomers {
		if n.Treated != treated || n.After != after {
			continue
		}
		g.Newcomers++
		units[n.Unit] = true
		if n.Stopped {
			g.Stopped++
		}
		times = append(times, n.Months)
		events = append(events, n.Stopped)
		for i := range h {
			if n.Retained[i] >= 0 {
				followed[i]++
				retained[i] += int(n.Retained[i])
			}
		}
		if n.FirstYearEdits >= 0 {
			fy = append(fy, float64(n.FirstYearEdits))
		}
	}
	g.Units = len(units)
	g.FollowedYear = len(fy)
	if len(fy) > 0 {
		g.FirstYearEdits = stat.Mean(fy, nil)
		slices.Sort(fy)
		g.FirstYearEditsMedian = stat.Quantile(0.5, stat.Empirical, fy, nil)
	}
	var curve *survival.Curve
	if len(times) > 0 {
		var err error
		if curve, err = survival.KaplanMeier(times, events); err != nil {
			return g, nil, fmt.Errorf("retention: %s areas %s: %w", g.Areas, g.Period, err)
		}
	}
	for i, m := range h {
		sh := Share{Months: m, Followed: followed[i], Retained: retained[i]}
		if sh.Followed > 0 {
			sh.Share = float64(sh.Retained) / float64(sh.Followed)
			sh.CI95[0], sh.CI95[1] = wilson(sh.Retained, sh.Followed)
		}
		if curve != nil {
			p := curve.At(float64(m), 0.95)
			sh.KM, sh.KMCI95 = p.Surv, [2]float64{p.Lower, p.Upper}
		}
		g.Retention = append(g.Retention, sh)
	}
	var pts []CurvePoint
	if curve != nil {
		for m := 0; m <= h[len(h)-1]; m++ {
			p := curve.At(float64(m), 0.95)
			pts = append(pts, CurvePoint{Areas: g.Areas, Period: g.Period, Month: m, Surv: p.Surv,
				CI95: [2]float64{p.Lower, p.Upper}, NRisk: p.NRisk})
		}
	}
	return g, pts, nil
}

// wilson is the Wilson score 95% interval of x of n (Wilson 1927).
func wilson(x, n int) (float64, float64) {
	const z = 1.959963984540054
	p, nf := float64(x)/float64(n), float64(n)
	c := (p + z*z/(2*nf)) / (1 + z*z/nf)
	w := z / (1 + z*z/nf) * math.Sqrt(p*(1-p)/nf+z*z/(4*nf*nf))
	return math.Max(0, c-w), math.Min(1, c+w)
}

// hazardRatio fits the Cox model of time to stopping on import area, after
// and their product, a baseline per cohort, SEs clustered by unit.
func hazardRatio(ctx context.Context, s *Sample) HazardRatio {
	hr := HazardRatio{Method: "Cox proportional hazards of stopping (Efron ties) on import area, after the import and their product, a baseline hazard per wave, robust standard errors clustered by unit (scaled by C/(C-1)), Student's t on G-1 degrees of freedom"}
	n := len(s.Newcomers)
	if n == 0 {
		hr.Note = "no newcomers"
		return hr
	}
	var stops [2][2]int
	for _, nc := range s.Newcomers {
		if nc.Stopped {
			stops[int(b01(nc.Treated))][int(b01(nc.After))]++
		}
	}
	for t := 1; t >= 0; t-- {
		for a := 0; a < 2; a++ {
			if stops[t][a] == 0 {
				hr.Note = fmt.Sprintf("not computed: no newcomer who started in %s areas %s the import has stopped yet, so the ratio has no finite estimate", areaWord(t == 1), periodWord(a == 1))
				return hr
			}
		}
	}
	x := mat.NewDense(n, 3, nil)
	d := survival.CoxData{Time: make([]float64, n), Event: make([]bool, n), X: x, Strata: make([]int, n), Cluster: make([]int, n)}
	for i, nc := range s.Newcomers {
		d.Time[i], d.Event[i], d.Strata[i], d.Cluster[i] = nc.Months, nc.Stopped, nc.Cohort, nc.Unit
		t, a := b01(nc.Treated), b01(nc.After)
		x.Set(i, 0, t)
		x.Set(i, 1, a)
		x.Set(i, 2, t*a)
	}
	fit, err := survival.Cox(ctx, d, survival.CoxOptions{})
	if err != nil {
		hr.Note = "not computed: " + err.Error()
		return hr
	}
	se := fit.SE[2]
	if math.IsNaN(se) || se == 0 {
		hr.Note = "not computed: no variation left for the import-area-after term"
		return hr
	}
	// The same few-cluster care as the bootstrap: the robust SE scaled by
	// C/(C−1) over its C clusters, Student's t on G−1 degrees of freedom,
	// G the import areas.
	nt := 0
	for _, u := range s.Treated {
		nt += len(u)
	}
	if nt < 2 || fit.Clusters < 2 {
		hr.Note = "not computed: fewer than 2 import areas"
		return hr
	}
	c := float64(fit.Clusters)
	se *= math.Sqrt(c / (c - 1))
	t := distuv.StudentsT{Mu: 0, Sigma: 1, Nu: float64(nt - 1)}
	b, q := fit.Coef[2], t.Quantile(0.975)
	hr.Estimate, hr.CI95, hr.P, hr.Computed = math.Exp(b), [2]float64{math.Exp(b - q*se), math.Exp(b + q*se)}, 2*t.Survival(math.Abs(b/se)), true
	if nt < MinUnits {
		hr.Note = fmt.Sprintf("only %d import areas: no interval from so few is reliable", nt)
	}
	return hr
}

func b01(b bool) float64 {
	if b {
		return 1
	}
	return 0
}

// logRank compares newcomers after the import, import against comparison
// areas, stratified by cohort.
func logRank(s *Sample) LogRankTest {
	var t []float64
	var ev, g []bool
	var st []int
	for _, n := range s.Newcomers {
		if n.After {
			t, ev, g, st = append(t, n.Months), append(ev, n.Stopped), append(g, n.Treated), append(st, n.Cohort)
		}
	}
	if len(t) == 0 {
		return LogRankTest{}
	}
	r, err := survival.LogRank(t, ev, g, st)
	if err != nil {
		return LogRankTest{}
	}
	return LogRankTest{ChiSq: r.ChiSq, P: r.P, Observed: r.Observed, Expected: r.Expected, Computed: true}
}
