package did

import (
	"context"
	"fmt"
	"math/rand/v2"

	"gonum.org/v1/gonum/mat"

	"github.com/loadwake/loadwake/audit/did/internal/robust"
	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/panel"
)

// The classic difference-in-differences, kept for reference next to the
// staggered estimators.
//
// did-2x2 compares, for every unit, its mean outcome after treatment with its
// mean before, and the treated units' change with the matched controls' change
// over the same months. With several cohorts each cohort g contributes its
// treated units and all never-treated controls with windows split at g; the
// long differences ΔY(u,g) are regressed on a treated dummy with one intercept
// per cohort (weights: matching weights), so with a single cohort the slope is
// exactly (Ȳ treated post − Ȳ treated pre) − (Ȳ control post − Ȳ control pre),
// the 2x2 of Card & Krueger (1994, Table 3). Pre and post windows are
// limited to the event window of Options.

// diffRow is one long difference of the 2x2 design.
type diffRow struct {
	cohort  int // index into cohorts
	treated bool
	unit    int
	d       float64 // ΔY = post mean − pre mean
	post    float64 // post mean (for the counterfactual level)
	w       float64
}

// longDiffs builds the 2x2 rows of outcome y for every cohort.
func longDiffs(p *panel.Panel, y []float64, cohorts []int, win Window) []diffRow {
	var rows []diffRow
	T := p.Months
	for ci, g := range cohorts {
		lo := max(0, g-win.Pre)
		hi := min(T, g+win.Post)
		if g-lo < 1 || hi-g < 1 {
			continue
		}
		for u, un := range p.Units {
			if un.Weight <= 0 || (un.FirstTreated != g && un.FirstTreated != -1) {
				continue
			}
			pre, post := 0.0, 0.0
			for t := lo; t < g; t++ {
				pre += y[u*T+t]
			}
			for t := g; t < hi; t++ {
				post += y[u*T+t]
			}
			pre /= float64(g - lo)
			post /= float64(hi - g)
			rows = append(rows, diffRow{cohort: ci, treated: un.FirstTreated == g, unit: u, d: post - pre, post: post, w: un.Weight})
		}
	}
	return rows
}

// did2x2 estimates the pooled 2x2 difference-in-differences of outcome y.
func did2x2(ctx context.Context, p *panel.Panel, y []float64, cohorts []int, cl []int, G int, opts Options, rng *rand.Rand) (*estimate, error) {
	rows := longDiffs(p, y, cohorts, opts.Window)
	nc := len(cohorts)
	// absorb cohort intercepts: weighted cohort means removed from x and y.
	x := make([]float64, len(rows))
	d := make([]float64, len(rows))
	w := make([]float64, len(rows))
	rc := make([]int, len(rows))
	ncl := make([]int, len(rows))
	for i, r := range rows {
		if r.treated {
			x[i] = 1
		}
		d[i], w[i], rc[i], ncl[i] = r.d, r.w, r.cohort, cl[r.unit]
	}
	absorb := func(v []float64) { robust.DemeanGroups(v, w, rc, nc) }
	tUnits, cUnits := map[int]bool{}, map[int]bool{}
	tClusters := map[int]bool{}
	postSum, postN := 0.0, 0.0
	for _, r := range rows {
		if r.treated {
			tUnits[r.unit] = true
			tClusters[cl[r.unit]] = true
			postSum += r.post
			postN++
		} else {
			cUnits[r.unit] = true
		}
	}
	if len(tUnits) < 2 || len(cUnits) < 2 {
		return nil, fmt.Errorf("%d treated and %d control units with months on both sides of treatment; need at least 2 of each", len(tUnits), len(cUnits))
	}
	reg := robust.OneReg{X: x, Y: d, W: w, Cl: ncl, G: G, KParams: nc + 1, Absorb: absorb}
	res, err := reg.Fit()
	if err != nil {
		return nil, err
	}
	e := &estimate{att: res.B, se: res.SE, treatedUnits: len(tUnits), controlUnits: len(cUnits),
		note: fmt.Sprintf("pooled 2x2 long differences, %d cohort(s), window %d months before and %d after, cohort intercepts", nc, opts.Window.Pre, opts.Window.Post)}
	tc := len(tClusters)
	if opts.useBootstrap(tc) {
		// The same regression with the cohort intercepts as columns, for
		// the restricted wild cluster bootstrap.
		xd := mat.NewDense(len(rows), 1+nc, nil)
		for i := range rows {
			xd.Set(i, 0, x[i])
			xd.Set(i, 1+rc[i], 1)
		}
		a := make([]float64, 1+nc)
		a[0] = 1
		if err := e.setWildRestricted(ctx, infer.Design{X: xd, Y: d, Weights: w, Cluster: ncl}, a, tc, opts, rng); err != nil {
			return nil, err
		}
	} else {
		c := robust.Critical(tc, res.G)
		e.lo, e.hi = res.B-c*res.SE, res.B+c*res.SE
		e.p = robust.PTwoSided(res.B/res.SE, tc, res.G)
		e.method = robust.AnalyticName(tc, res.G)
	}
	e.setRelativeLinear(postSum / postN)
	return e, nil
}
