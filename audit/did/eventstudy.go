package did

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/did/poisson"
	"github.com/loadwake/loadwake/audit/infer"

	"github.com/loadwake/loadwake/audit/panel"
	"gonum.org/v1/gonum/mat"
)

// The linear event study: y_ut = α_u + γ_t + Σ_e β_e·1[t − g_u = e] + ε_ut
// over every unit with positive weight (treated cohorts and never-treated
// controls), weighted by the matching weights, with event times binned at
// the window's ends (e ≤ −Pre counts as −Pre, e ≥ Post−1 as Post−1) and
// e = −1 as the reference. It is the familiar two-way fixed-effects picture
// for the plot; with staggered timing its coefficients mix cohorts with
// weights that can be negative (Goodman-Bacon 2021; Sun & Abraham 2021), so
// the cs-att row is the headline and this one a cross-check.
//
// The fixed effects are removed in closed form: in a balanced panel whose
// weights are constant within a unit, x − x̄_u − x̄ʷ_t + x̄ʷ (x̄_u the unit's
// mean over months, x̄ʷ_t the weighted mean over units of month t) is the
// exact weighted projection off both sets of dummies.
//
// Event times no treated unit reaches get no column. twfe-linear's att is
// the mean of the post coefficients e = 0..Post−1 present,
// pre_trend_p the joint Wald test that all leads are zero (CR1 variance).

// esDesign is the event-time design shared by every outcome.
type esDesign struct {
	p      *panel.Panel
	units  []int // units with weight > 0
	w      []float64
	ev     []int // per kept unit row (len(units)*T): column of the event dummy or −1
	cols   []int // event time of each column
	K      int
	xu     [][]float64 // per kept unit: mean over months of each column
	xt     [][]float64 // per month: weighted mean over units
	xa     []float64
	W      float64
	xtxInv *mat.SymDense
	tUnits int
	cUnits int
}

func newESDesign(p *panel.Panel, win Window) (*esDesign, error) {
	T := p.Months
	d := &esDesign{p: p}
	// columns: binned event times that occur, except the reference −1
	present := map[int]bool{}
	for _, un := range p.Units {
		if un.Weight <= 0 || un.FirstTreated < 0 {
			continue
		}
		for t := range T {
			present[min(max(t-un.FirstTreated, -win.Pre), win.Post-1)] = true
		}
	}
	col := map[int]int{}
	for e := -win.Pre; e < win.Post; e++ {
		if e == -1 || !present[e] {
			continue
		}
		col[e] = len(d.cols)
		d.cols = append(d.cols, e)
	}
	d.K = len(d.cols)
	for u, un := range p.Units {
		if un.Weight <= 0 {
			continue
		}
		d.units = append(d.units, u)
		d.w = append(d.w, un.Weight)
		if un.FirstTreated >= 0 {
			d.tUnits++
		} else {
			d.cUnits++
		}
	}
	nu := len(d.units)
	d.ev = make([]int, nu*T)
	d.xu = make([][]float64, nu)
	d.xt = make([][]float64, T)
	for t := range T {
		d.xt[t] = make([]float64, d.K)
	}
	d.xa = make([]float64, d.K)
	for r, u := range d.units {
		d.xu[r] = make([]float64, d.K)
		g := p.Units[u].FirstTreated
		for t := range T {
			d.ev[r*T+t] = -1
			if g < 0 {
				continue
			}
			e := min(max(t-g, -win.Pre), win.Post-1)
			if c, ok := col[e]; ok {
				d.ev[r*T+t] = c
				d.xu[r][c] += 1 / float64(T)
				d.xt[t][c] += d.w[r]
			}
		}
		d.W += d.w[r]
	}
	for t := range T {
		for c := range d.K {
			d.xt[t][c] /= d.W
			d.xa[c] += d.xt[t][c] / float64(T)
		}
	}
	xtx := mat.NewSymDense(d.K, nil)
	row := make([]float64, d.K)
	for r := range d.units {
		for t := range T {
			d.rowTilde(r, t, row)
			robust.AddOuter(xtx, row, d.w[r])
		}
	}
	d.xtxInv = mat.NewSymDense(d.K, nil)
	if err := poisson.InvSym(d.xtxInv, xtx); err != nil {
		return nil, fmt.Errorf("event study: %w (no variation in event time; check first-treated months and window)", err)
	}
	return d, nil
}

// rowTilde writes the demeaned regressor row of unit row r, month t.
func (d *esDesign) rowTilde(r, t int, row []float64) {
	for c := range row {
		row[c] = -d.xu[r][c] - d.xt[t][c] + d.xa[c]
	}
	if c := d.ev[r*d.p.Months+t]; c >= 0 {
		row[c]++
	}
}

// twfeEventStudy fits the event study of outcome y.
func twfeEventStudy(ctx context.Context, d *esDesign, y []float64, cl []int, G int, opts Options, rng *rand.Rand) (*estimate, error) {
	p, T, K := d.p, d.p.Months, d.K
	nu := len(d.units)
	// demeaned outcome
	yu := make([]float64, nu)
	yt := make([]float64, T)
	ya := 0.0
	for r, u := range d.units {
		for t := range T {
			v := y[u*T+t]
			yu[r] += v / float64(T)
			yt[t] += d.w[r] * v / d.W
		}
	}
	for t := range T {
		ya += yt[t] / float64(T)
	}
	yTilde := func(r, t int) float64 { return y[d.units[r]*T+t] - yu[r] - yt[t] + ya }
	xty := make([]float64, K)
	row := make([]float64, K)
	for r := range d.units {
		for t := range T {
			d.rowTilde(r, t, row)
			yv := d.w[r] * yTilde(r, t)
			for c, x := range row {
				xty[c] += x * yv
			}
		}
	}
	beta := make([]float64, K)
	mat.NewVecDense(K, beta).MulVec(d.xtxInv, mat.NewVecDense(K, xty))
	scores := make([]float64, G*K)
	used := make([]bool, G)
	tClusters := map[int]bool{}
	postSum, postN := 0.0, 0.0
	for r, u := range d.units {
		g := cl[u]
		used[g] = true
		ft := p.Units[u].FirstTreated
		if ft >= 0 {
			tClusters[g] = true
		}
		for t := range T {
			d.rowTilde(r, t, row)
			fit := 0.0
			for c, x := range row {
				fit += x * beta[c]
			}
			res := d.w[r] * (yTilde(r, t) - fit)
			for c, x := range row {
				scores[g*K+c] += x * res
			}
			if ft >= 0 && t >= ft && t-ft < opts.Window.Post {
				postSum += y[u*T+t]
				postN++
			}
		}
	}
	n := nu * T
	kParams := K + nu + T - 1
	v, Gu := robust.SandwichCR1(d.xtxInv, scores, used, K, n, kParams)
	tc := len(tClusters)
	if tc == 0 || Gu < 2 {
		return nil, fmt.Errorf("event study: %d treated clusters of %d; need treated units and at least 2 clusters", tc, Gu)
	}
	crit := robust.Critical(tc, Gu)
	e := &estimate{treatedUnits: d.tUnits, controlUnits: d.cUnits, method: robust.AnalyticName(tc, Gu)}
	// post average and leads
	cvec := make([]float64, K)
	var leads []int
	nPost := 0
	for _, ev := range d.cols {
		if ev >= 0 {
			nPost++
		}
	}
	for c, ev := range d.cols {
		if ev >= 0 {
			cvec[c] = 1 / float64(nPost)
		} else {
			leads = append(leads, c)
		}
		se := math.Sqrt(v.At(c, c))
		e.events = append(e.events, eventPoint{e: ev, est: beta[c], se: se, lo: beta[c] - crit*se, hi: beta[c] + crit*se})
	}
	e.events = append(e.events, eventPoint{e: -1, reference: true})
	cv := mat.NewVecDense(K, cvec)
	e.att = mat.Dot(cv, mat.NewVecDense(K, beta))
	e.se = math.Sqrt(mat.Inner(cv, v, cv))
	if !(e.se > 0) {
		return nil, errSingular
	}
	e.lo, e.hi = e.att-crit*e.se, e.att+crit*e.se
	e.p = robust.PTwoSided(e.att/e.se, tc, Gu)
	if opts.useBootstrap(tc) {
		if err := e.setWildRestricted(ctx, d.linearDesign(y, cl), d.fullRestriction(cvec), tc, opts, rng); err != nil {
			return nil, err
		}
	}
	if len(leads) > 0 {
		b := make([]float64, len(leads))
		vl := mat.NewSymDense(len(leads), nil)
		for i, a := range leads {
			b[i] = beta[a]
			for j := i; j < len(leads); j++ {
				vl.SetSym(i, j, v.At(a, leads[j]))
			}
		}
		if pv, ok := robust.LeadTest(b, vl, Gu); ok {
			e.preP, e.hasPre = pv, true
		}
	}
	if postN > 0 {
		e.setRelativeLinear(postSum / postN)
	}
	e.note = fmt.Sprintf("linear two-way fixed effects event study, leads %d..-2 and lags 0..%d (ends binned, reference -1); att = mean of lags; biased under staggered timing with changing effects (Goodman-Bacon 2021)",
		-opts.Window.Pre, opts.Window.Post-1)
	return e, nil
}

// linearDesign returns the event study as an infer.Design for the restricted
// wild cluster bootstrap: the event columns, then a dummy for every month but
// the first (month effects are not nested in the clusters, so they stay in
// X), the unit effects absorbed (each unit lies in one cluster).
func (d *esDesign) linearDesign(y []float64, cl []int) infer.Design {
	T := d.p.Months
	n := len(d.units) * T
	x := mat.NewDense(n, d.K+T-1, nil)
	ys := make([]float64, n)
	w := make([]float64, n)
	cls := make([]int, n)
	unit := make([]int, n)
	for r, u := range d.units {
		for t := range T {
			i := r*T + t
			if c := d.ev[i]; c >= 0 {
				x.Set(i, c, 1)
			}
			if t > 0 {
				x.Set(i, d.K+t-1, 1)
			}
			ys[i], w[i], cls[i], unit[i] = y[u*T+t], d.w[r], cl[u], r
		}
	}
	return infer.Design{X: x, Y: ys, Weights: w, Cluster: cls, Absorb: unit}
}

// fullRestriction extends a restriction on the event columns with zeros for
// the month columns of linearDesign.
func (d *esDesign) fullRestriction(a []float64) []float64 {
	return append(slices.Clone(a), make([]float64, d.p.Months-1)...)
}
