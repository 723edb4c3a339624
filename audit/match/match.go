package match

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat"
)

// ErrMatch is returned (wrapped) for matching input that cannot be used:
// mismatched columns, no rows, non-finite values, or bad options.
var ErrMatch = errors.New("match: cannot match")

// CovarianceKind chooses the covariance matrix behind the Mahalanobis distance.
type CovarianceKind int

const (
	// CovPooled is the pooled within-group covariance: each covariate is
	// centred on its own group's mean (treated or control), then the
	// cross-products over all n rows are divided by n − 2. This is the
	// matrix MatchIt 4 uses for distance = "mahalanobis" (its help page
	// ?distance, and MatchIt:::pooled_cov). The default.
	CovPooled CovarianceKind = iota
	// CovControls is the sample covariance of the control rows alone.
	CovControls
)

// CaliperScale says in which units Options.Caliper is given.
type CaliperScale int

const (
	// CaliperSD reads the caliper in standard deviations of the distance:
	// the standard deviation of the distances of all treated–control pairs
	// (for OnPropensity, of the logit score; see there). The default.
	CaliperSD CaliperScale = iota
	// CaliperAbsolute reads the caliper in distance units.
	CaliperAbsolute
)

// Options tunes Nearest. The zero value gives 3 controls per
// treated unit, pooled covariance, no caliper.
type Options struct {
	// K is the number of controls per treated unit (default 3). Matching is
	// with replacement: a control may serve several treated units.
	K int
	// Caliper, when positive, is the largest distance a match may have, in
	// the units CaliperScale names. Treated units with no control inside it
	// are dropped and listed in Matching.Dropped; a treated unit with fewer
	// than K controls inside it keeps those it has.
	Caliper      float64
	CaliperScale CaliperScale
	Covariance   CovarianceKind
	// EigenTolerance: eigenvalues of the covariance below EigenTolerance
	// times the largest are treated as zero, giving the Moore–Penrose
	// pseudo-inverse (default 1e-10). A singular covariance (a constant or
	// collinear covariate) therefore drops the degenerate directions from
	// the distance instead of failing; Matching.Rank reports what was kept.
	EigenTolerance float64
}

// Match is one control chosen for a treated unit.
type Match struct {
	Control  int     // row of the controls matrix
	Distance float64 // Mahalanobis (or score) distance
}

// Matching is the result of Nearest or OnPropensity.
type Matching struct {
	// Matches holds, per treated row, its controls nearest first; empty for
	// dropped rows. Among controls at exactly the same distance the one in
	// the lower row wins, as in MatchIt (data order).
	Matches [][]Match
	// Dropped lists treated rows with no control inside the caliper.
	Dropped []int
	// TreatedWeights is 1 for kept treated rows and 0 for dropped ones.
	TreatedWeights []float64
	// ControlWeights gives each control row the sum, over the treated units
	// it serves, of 1/(number of controls that treated unit has): with K
	// controls each, times used / K. Unused controls weigh 0. The weights sum
	// to the number of kept treated units (ATT weights). MatchIt rescales
	// the same weights to sum to the number of distinct matched controls.
	ControlWeights []float64
	// Caliper is the caliper applied, in distance units (0: none).
	Caliper float64
	// Rank is the rank of the covariance used (its column count when not
	// singular); 0 for score matching.
	Rank int
	// PairSD is the standard deviation of all treated–control distances.
	PairSD float64
	// Propensity is the fitted propensity model for score matching, nil
	// for Mahalanobis matching.
	Propensity *LogitFit
}

// Nearest matches each treated row to its opts.K nearest control rows,
// with replacement, by Mahalanobis distance d = sqrt((x − y)' S⁺ (x − y)) with
// S the covariance opts.Covariance names and S⁺ its (pseudo-)inverse. It
// whitens both matrices once (S⁺ = W W' from the eigen-decomposition of S)
// and then compares every treated row with every control row; cost is
// O((nt + nc)·p² + nt·nc·p). Rows are units, columns covariates; the column
// order must agree.
func Nearest(treated, controls *mat.Dense, opts Options) (*Matching, error) {
	_, p, _, err := checkMatchInput(treated, controls)
	if err != nil {
		return nil, err
	}
	if opts.EigenTolerance <= 0 {
		opts.EigenTolerance = 1e-10
	}
	var cov *mat.SymDense
	switch opts.Covariance {
	case CovPooled:
		cov = pooledCovariance(treated, controls)
	case CovControls:
		cov = mat.NewSymDense(p, nil)
		stat.CovarianceMatrix(cov, controls, nil)
	default:
		return nil, fmt.Errorf("%w: unknown covariance kind %d", ErrMatch, opts.Covariance)
	}
	var eig mat.EigenSym
	if !eig.Factorize(cov, true) {
		return nil, fmt.Errorf("%w: eigen-decomposition of the covariance failed", ErrMatch)
	}
	vals := eig.Values(nil)
	var vecs mat.Dense
	eig.VectorsTo(&vecs)
	top := 0.0
	for _, v := range vals {
		top = math.Max(top, v)
	}
	if !(top > 0) {
		return nil, fmt.Errorf("%w: every covariate is constant", ErrMatch)
	}
	// W = V Λ^(−1/2) over the kept eigenvalues.
	var keep []int
	for i, v := range vals {
		if v > opts.EigenTolerance*top {
			keep = append(keep, i)
		}
	}
	w := mat.NewDense(p, len(keep), nil)
	for c, i := range keep {
		s := 1 / math.Sqrt(vals[i])
		for r := range p {
			w.Set(r, c, vecs.At(r, i)*s)
		}
	}
	var zt, zc mat.Dense
	zt.Mul(treated, w)
	zc.Mul(controls, w)
	m, err := matchOnScores(&zt, &zc, opts)
	if err != nil {
		return nil, err
	}
	m.Rank = len(keep)
	return m, nil
}

// checkMatchInput validates the two matrices for matching.
func checkMatchInput(treated, controls *mat.Dense) (nt, p, nc int, err error) {
	if treated == nil || controls == nil || treated.IsEmpty() || controls.IsEmpty() {
		return 0, 0, 0, fmt.Errorf("%w: no treated or no control rows", ErrMatch)
	}
	nt, p = treated.Dims()
	nc, pc := controls.Dims()
	if p != pc {
		return 0, 0, 0, fmt.Errorf("%w: %d treated columns but %d control columns", ErrMatch, p, pc)
	}
	for _, g := range []struct {
		name string
		m    *mat.Dense
	}{{"treated", treated}, {"control", controls}} {
		r, c := g.m.Dims()
		for i := range r {
			for j := range c {
				if v := g.m.At(i, j); math.IsNaN(v) || math.IsInf(v, 0) {
					return 0, 0, 0, fmt.Errorf("%w: %s row %d column %d is %v", ErrMatch, g.name, i, j, v)
				}
			}
		}
	}
	return nt, p, nc, nil
}

// pooledCovariance returns the pooled within-group covariance: columns centred
// on their group means, cross-products over both groups divided by n − 2.
func pooledCovariance(treated, controls *mat.Dense) *mat.SymDense {
	nt, p := treated.Dims()
	nc, _ := controls.Dims()
	cov := mat.NewSymDense(p, nil)
	for _, g := range []*mat.Dense{treated, controls} {
		r, _ := g.Dims()
		mean := make([]float64, p)
		for j := range p {
			mean[j] = stat.Mean(mat.Col(nil, j, g), nil)
		}
		for i := range r {
			row := g.RawRowView(i)
			for a := range p {
				da := row[a] - mean[a]
				for b := a; b < p; b++ {
					cov.SetSym(a, b, cov.At(a, b)+da*(row[b]-mean[b]))
				}
			}
		}
	}
	cov.ScaleSym(1/float64(nt+nc-2), cov)
	return cov
}

// matchOnScores does the nearest-neighbour search by Euclidean distance
// between rows of zt and zc (whitened covariates or 1-column scores).
func matchOnScores(zt, zc *mat.Dense, opts Options) (*Matching, error) {
	nt, _, nc, err := checkMatchInput(zt, zc)
	if err != nil {
		return nil, err
	}
	k := opts.K
	if k == 0 {
		k = 3
	}
	if k < 0 {
		return nil, fmt.Errorf("%w: K = %d", ErrMatch, opts.K)
	}
	if k > nc {
		return nil, fmt.Errorf("%w: K = %d but only %d controls", ErrMatch, k, nc)
	}
	if opts.Caliper < 0 || math.IsNaN(opts.Caliper) {
		return nil, fmt.Errorf("%w: caliper %v", ErrMatch, opts.Caliper)
	}
	if opts.CaliperScale != CaliperSD && opts.CaliperScale != CaliperAbsolute {
		return nil, fmt.Errorf("%w: unknown caliper scale %d", ErrMatch, opts.CaliperScale)
	}
	m := &Matching{
		Matches:        make([][]Match, nt),
		TreatedWeights: make([]float64, nt),
		ControlWeights: make([]float64, nc),
	}
	// Nearest K per treated row by squared distance, kept sorted by
	// (distance, control row); pair distances feed a running mean and
	// variance (Welford) for the SD caliper.
	best := make([]Match, 0, k+1)
	var count, mean, m2 float64
	for i := range nt {
		x := zt.RawRowView(i)
		best = best[:0]
		for c := range nc {
			y := zc.RawRowView(c)
			d2 := 0.0
			for j, v := range x {
				diff := v - y[j]
				d2 += diff * diff
			}
			d := math.Sqrt(d2)
			count++
			delta := d - mean
			mean += delta / count
			m2 += delta * (d - mean)
			if len(best) == k && d2 >= best[k-1].Distance {
				continue
			}
			// Insert keeping order; equal distances keep the earlier row first.
			pos := sort.Search(len(best), func(q int) bool { return best[q].Distance > d2 })
			if len(best) < k {
				best = append(best, Match{})
			}
			copy(best[pos+1:], best[pos:len(best)-1])
			best[pos] = Match{Control: c, Distance: d2}
		}
		ms := make([]Match, len(best))
		for q, b := range best {
			ms[q] = Match{Control: b.Control, Distance: math.Sqrt(b.Distance)}
		}
		m.Matches[i] = ms
	}
	if count > 1 {
		m.PairSD = math.Sqrt(m2 / (count - 1))
	}
	if opts.Caliper > 0 {
		m.Caliper = opts.Caliper
		if opts.CaliperScale == CaliperSD {
			m.Caliper = opts.Caliper * m.PairSD
		}
	}
	for i, ms := range m.Matches {
		if m.Caliper > 0 {
			kept := ms[:0]
			for _, x := range ms {
				if x.Distance <= m.Caliper {
					kept = append(kept, x)
				}
			}
			ms = kept
			m.Matches[i] = ms
		}
		if len(ms) == 0 {
			m.Dropped = append(m.Dropped, i)
			m.Matches[i] = nil
			continue
		}
		m.TreatedWeights[i] = 1
		for _, x := range ms {
			m.ControlWeights[x.Control] += 1 / float64(len(ms))
		}
	}
	return m, nil
}

// BalanceRow is one covariate's balance before and after matching.
type BalanceRow struct {
	Name string
	// Means of the treated and control groups before matching, and after
	// (treated: kept rows; controls: weighted by ControlWeights).
	MeanTreated, MeanControl               float64
	MatchedMeanTreated, MatchedMeanControl float64
	// SMD and MatchedSMD are standardized mean differences
	// (mean_t − mean_c)/sqrt((var_t + var_c)/2) (Austin 2009, "Balance
	// diagnostics for comparing the distribution of baseline covariates
	// between treatment groups in propensity-score matched samples",
	// Statistics in Medicine 28). The denominator is computed once, from the
	// unmatched samples, so that the change reflects the means only (as
	// MatchIt and cobalt do).
	SMD, MatchedSMD float64
	// TreatedSMD and MatchedTreatedSMD divide by the standard deviation of
	// the unmatched treated group instead: MatchIt's default "Std. Mean
	// Diff." for the ATT.
	TreatedSMD, MatchedTreatedSMD float64
	// Imbalanced flags |SMD| ≥ 0.1 before matching, MatchedImbalanced after
	// (the 0.1 rule of thumb, Austin 2009).
	Imbalanced, MatchedImbalanced bool
}

// BalanceThreshold is the |SMD| at or above which a covariate is flagged
// (Austin 2009's rule of thumb).
const BalanceThreshold = 0.1

// Balance returns one row per covariate (column), named by names, comparing
// treated and control rows before matching and after, with the treated rows
// weighted by m.TreatedWeights and the control rows by m.ControlWeights.
// Variances are the usual n − 1 sample variances. A covariate constant in
// both groups has SMD 0 when the means agree and ±Inf otherwise.
func Balance(names []string, treated, controls *mat.Dense, m *Matching) ([]BalanceRow, error) {
	nt, p, nc, err := checkMatchInput(treated, controls)
	if err != nil {
		return nil, err
	}
	if len(names) != p {
		return nil, fmt.Errorf("%w: %d names for %d covariates", ErrMatch, len(names), p)
	}
	if m == nil || len(m.TreatedWeights) != nt || len(m.ControlWeights) != nc {
		return nil, fmt.Errorf("%w: matching does not fit %d treated and %d control rows", ErrMatch, nt, nc)
	}
	rows := make([]BalanceRow, p)
	xt := make([]float64, nt)
	xc := make([]float64, nc)
	for j := range p {
		mat.Col(xt, j, treated)
		mat.Col(xc, j, controls)
		mt, vt := stat.MeanVariance(xt, nil)
		mc, vc := stat.MeanVariance(xc, nil)
		r := BalanceRow{
			Name:               names[j],
			MeanTreated:        mt,
			MeanControl:        mc,
			MatchedMeanTreated: stat.Mean(xt, m.TreatedWeights),
			MatchedMeanControl: stat.Mean(xc, m.ControlWeights),
		}
		pooled := math.Sqrt((vt + vc) / 2)
		sdT := math.Sqrt(vt)
		r.SMD = smd(mt-mc, pooled)
		r.MatchedSMD = smd(r.MatchedMeanTreated-r.MatchedMeanControl, pooled)
		r.TreatedSMD = smd(mt-mc, sdT)
		r.MatchedTreatedSMD = smd(r.MatchedMeanTreated-r.MatchedMeanControl, sdT)
		r.Imbalanced = math.Abs(r.SMD) >= BalanceThreshold
		r.MatchedImbalanced = math.Abs(r.MatchedSMD) >= BalanceThreshold
		rows[j] = r
	}
	return rows, nil
}

// smd divides a mean difference by a standard deviation, giving 0 for 0/0.
func smd(diff, sd float64) float64 {
	if sd == 0 && diff == 0 {
		return 0
	}
	return diff / sd
}
