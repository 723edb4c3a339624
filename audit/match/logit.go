package match

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/optimize"
	"gonum.org/v1/gonum/stat"
)

// ErrModel is returned (wrapped) when a model cannot be fitted to the data
// given: mismatched sizes, non-finite covariates, outcomes other than 0 and 1,
// a constant outcome, or a singular information matrix.
var ErrModel = errors.New("match: cannot fit model")

// LogitOptions tunes FitLogit. The zero value is usable; DefaultLogitOptions
// spells the defaults out.
type LogitOptions struct {
	// MaxIterations bounds the Newton iterations (default 100).
	MaxIterations int
	// GradientTolerance stops the search when the infinity norm of the
	// log-likelihood gradient, in standardized covariates and divided by
	// the number of rows, falls below it (default 1e-10).
	GradientTolerance float64
}

// DefaultLogitOptions returns the defaults FitLogit uses for zero fields.
func DefaultLogitOptions() LogitOptions {
	return LogitOptions{MaxIterations: 100, GradientTolerance: 1e-10}
}

// LogitFit is a fitted logistic regression P(y = 1 | x) = 1/(1 + exp(−η)),
// η = Coef[0] + Σ Coef[j+1]·x[j].
type LogitFit struct {
	// Coef holds the intercept first, then one coefficient per covariate
	// column, in the units of the covariates given.
	Coef []float64
	// SE are standard errors: square roots of the diagonal of Cov.
	SE []float64
	// Cov is the inverse of the observed information (the Hessian of the
	// negative log-likelihood) at the estimate. For the logit link observed
	// and expected information coincide, so these match R's glm().
	Cov *mat.SymDense
	// LogLik is the maximized log-likelihood.
	LogLik float64
	// Iterations is the number of Newton iterations taken.
	Iterations int
	// Converged reports whether the gradient tolerance was met. When it is
	// false the estimates are the last iterate and should not be used.
	Converged bool
	// Status is gonum/optimize's termination status.
	Status optimize.Status
	// Separation is set when some fitted probability is within 1e-10 of 0 or
	// 1: the data are (nearly) separated, the maximum likelihood estimate may
	// not exist, and the standard errors are unreliable.
	Separation bool
}

// LinearPredictor returns η for each row of x (same columns as the fit, no
// intercept column): the logit of the fitted propensity score.
func (f *LogitFit) LinearPredictor(x *mat.Dense) ([]float64, error) {
	r, c := x.Dims()
	if c != len(f.Coef)-1 {
		return nil, fmt.Errorf("%w: %d columns, fit has %d covariates", ErrModel, c, len(f.Coef)-1)
	}
	eta := make([]float64, r)
	for i := range r {
		s := f.Coef[0]
		for j := range c {
			s += f.Coef[j+1] * x.At(i, j)
		}
		eta[i] = s
	}
	return eta, nil
}

// FitLogit fits a logistic regression of y (each 0 or 1) on the columns of x
// plus an intercept by maximum likelihood. It minimizes the negative
// log-likelihood with gonum/optimize's Newton method using the analytic
// gradient X'(y − p) and Hessian X'WX, W = diag(p(1 − p)). Covariates are
// centred and scaled to unit standard deviation for the search (so dollar
// amounts and ages converge alike); coefficients and their covariance are
// mapped back to the original units. A constant covariate column is an error.
// When the search does not converge FitLogit returns the last iterate with an
// error wrapping ErrModel; with (quasi-)separation it sets Separation and
// also returns such an error.
func FitLogit(x *mat.Dense, y []float64, opts LogitOptions) (*LogitFit, error) {
	def := DefaultLogitOptions()
	if opts.MaxIterations <= 0 {
		opts.MaxIterations = def.MaxIterations
	}
	if opts.GradientTolerance <= 0 {
		opts.GradientTolerance = def.GradientTolerance
	}
	n, p := x.Dims()
	if n != len(y) {
		return nil, fmt.Errorf("%w: %d rows but %d outcomes", ErrModel, n, len(y))
	}
	if n <= p+1 {
		return nil, fmt.Errorf("%w: %d rows for %d coefficients", ErrModel, n, p+1)
	}
	ones := 0
	for i, v := range y {
		if v != 0 && v != 1 {
			return nil, fmt.Errorf("%w: outcome %v at row %d is not 0 or 1", ErrModel, v, i)
		}
		ones += int(v)
	}
	if ones == 0 || ones == n {
		return nil, fmt.Errorf("%w: outcome is constant (%d of %d rows are 1)", ErrModel, ones, n)
	}
	// Standardized design with a leading column of ones.
	z := mat.NewDense(n, p+1, nil)
	centre := make([]float64, p)
	scale := make([]float64, p)
	col := make([]float64, n)
	for j := range p {
		mat.Col(col, j, x)
		for i, v := range col {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return nil, fmt.Errorf("%w: covariate %d at row %d is %v", ErrModel, j, i, v)
			}
		}
		m, s := stat.MeanStdDev(col, nil)
		if !(s > 0) {
			return nil, fmt.Errorf("%w: covariate %d is constant", ErrModel, j)
		}
		centre[j], scale[j] = m, s
	}
	for i := range n {
		z.Set(i, 0, 1)
		for j := range p {
			z.Set(i, j+1, (x.At(i, j)-centre[j])/scale[j])
		}
	}

	k := p + 1
	eta := make([]float64, n)
	linpred := func(b []float64) {
		for i := range n {
			row := z.RawRowView(i)
			s := 0.0
			for j, v := range row {
				s += v * b[j]
			}
			eta[i] = s
		}
	}
	negLogLik := func(b []float64) float64 {
		linpred(b)
		s := 0.0
		for i, e := range eta {
			// log(1 + exp(e)) − y·e, written to avoid overflow.
			s += softplus(e) - y[i]*e
		}
		return s
	}
	problem := optimize.Problem{
		Func: negLogLik,
		Grad: func(g, b []float64) {
			linpred(b)
			for j := range g {
				g[j] = 0
			}
			for i, e := range eta {
				r := sigmoid(e) - y[i]
				row := z.RawRowView(i)
				for j, v := range row {
					g[j] += r * v
				}
			}
		},
		Hess: func(h *mat.SymDense, b []float64) {
			linpred(b)
			for a := range k {
				for c := a; c < k; c++ {
					h.SetSym(a, c, 0)
				}
			}
			for i, e := range eta {
				pi := sigmoid(e)
				w := pi * (1 - pi)
				row := z.RawRowView(i)
				for a := range k {
					wa := w * row[a]
					for c := a; c < k; c++ {
						h.SetSym(a, c, h.At(a, c)+wa*row[c])
					}
				}
			}
		},
	}
	settings := &optimize.Settings{
		GradientThreshold: opts.GradientTolerance * float64(n),
		MajorIterations:   opts.MaxIterations,
		Converger:         optimize.NeverTerminate{},
	}
	start := make([]float64, k)
	// Start from the intercept-only fit: logit of the share of ones.
	start[0] = math.Log(float64(ones) / float64(n-ones))
	res, err := optimize.Minimize(problem, start, settings, &optimize.Newton{GradStopThreshold: math.NaN()})
	if res == nil {
		return nil, fmt.Errorf("%w: %v", ErrModel, err)
	}
	bz := res.X
	fit := &LogitFit{
		LogLik:     -res.F,
		Iterations: res.MajorIterations,
		Converged:  res.Status == optimize.GradientThreshold,
		Status:     res.Status,
	}

	// Information in standardized units, then its inverse.
	hz := mat.NewSymDense(k, nil)
	problem.Hess(hz, bz)
	var chol mat.Cholesky
	if !chol.Factorize(hz) {
		return nil, fmt.Errorf("%w: information matrix is singular (collinear covariates or separation)", ErrModel)
	}
	covz := mat.NewSymDense(k, nil)
	if err := chol.InverseTo(covz); err != nil {
		return nil, fmt.Errorf("%w: inverting the information matrix: %v", ErrModel, err)
	}
	// β = A·βz with A mapping standardized to original coefficients:
	// β_j = βz_j/s_j (j ≥ 1), β_0 = βz_0 − Σ βz_j m_j/s_j.
	a := mat.NewDense(k, k, nil)
	a.Set(0, 0, 1)
	for j := range p {
		a.Set(0, j+1, -centre[j]/scale[j])
		a.Set(j+1, j+1, 1/scale[j])
	}
	fit.Coef = make([]float64, k)
	mat.NewVecDense(k, fit.Coef).MulVec(a, mat.NewVecDense(k, bz))
	cov := mat.NewSymDense(k, nil)
	var tmp, full mat.Dense
	tmp.Mul(a, covz)
	full.Mul(&tmp, a.T())
	for r := range k {
		for c := r; c < k; c++ {
			cov.SetSym(r, c, (full.At(r, c)+full.At(c, r))/2)
		}
	}
	fit.Cov = cov
	fit.SE = make([]float64, k)
	for j := range k {
		fit.SE[j] = math.Sqrt(cov.At(j, j))
	}
	linpred(bz)
	for _, e := range eta {
		if pi := sigmoid(e); pi < 1e-10 || pi > 1-1e-10 {
			fit.Separation = true
			break
		}
	}
	if fit.Separation {
		return fit, fmt.Errorf("%w: fitted probabilities of 0 or 1 after %d iterations: the outcome is (nearly) separated by the covariates, so the estimates and standard errors are not usable", ErrModel, fit.Iterations)
	}
	if !fit.Converged {
		return fit, fmt.Errorf("%w: no convergence after %d Newton iterations (status %v, %v)", ErrModel, fit.Iterations, res.Status, err)
	}
	return fit, nil
}

// sigmoid is the logistic function 1/(1 + exp(−e)), stable for large |e|.
func sigmoid(e float64) float64 {
	if e >= 0 {
		return 1 / (1 + math.Exp(-e))
	}
	x := math.Exp(e)
	return x / (1 + x)
}

// softplus is log(1 + exp(e)), stable for large |e|.
func softplus(e float64) float64 {
	if e > 0 {
		return e + math.Log1p(math.Exp(-e))
	}
	return math.Log1p(math.Exp(e))
}

// Propensity estimates propensity scores and matches on them: it fits
// FitLogit to the stacked rows (treated rows outcome 1, control rows 0, an
// intercept plus every column) and calls OnPropensity with that fit. The fit
// is kept in Matching.Propensity. A model that fails to fit or converge is an
// error wrapping ErrModel.
func Propensity(treated, controls *mat.Dense, opts Options) (*Matching, error) {
	nt, p, nc, err := checkMatchInput(treated, controls)
	if err != nil {
		return nil, err
	}
	x := mat.NewDense(nt+nc, p, nil)
	x.Slice(0, nt, 0, p).(*mat.Dense).Copy(treated)
	x.Slice(nt, nt+nc, 0, p).(*mat.Dense).Copy(controls)
	y := make([]float64, nt+nc)
	for i := range nt {
		y[i] = 1
	}
	fit, err := FitLogit(x, y, LogitOptions{})
	if err != nil {
		return nil, fmt.Errorf("propensity model: %w", err)
	}
	return OnPropensity(fit, treated, controls, opts)
}

// OnPropensity matches each treated row to its nearest controls on the
// logit of the propensity score from fit (Rosenbaum and Rubin 1985; Austin
// 2011, "Optimal caliper widths for propensity-score matching", Pharmaceutical
// Statistics 10, recommends a caliper of 0.2 standard deviations of the logit).
// The distance is |η_t − η_c|. opts.K, opts.Caliper and opts.CaliperScale
// apply as in Nearest except that a CaliperSD caliper is in units of the
// pooled standard deviation of the logit, sqrt((var_t + var_c)/2), following
// Austin (2011); opts.Covariance is ignored.
func OnPropensity(fit *LogitFit, treated, controls *mat.Dense, opts Options) (*Matching, error) {
	et, err := fit.LinearPredictor(treated)
	if err != nil {
		return nil, fmt.Errorf("treated: %w", err)
	}
	ec, err := fit.LinearPredictor(controls)
	if err != nil {
		return nil, fmt.Errorf("controls: %w", err)
	}
	if opts.Caliper > 0 && opts.CaliperScale == CaliperSD {
		pooled := math.Sqrt((stat.Variance(et, nil) + stat.Variance(ec, nil)) / 2)
		opts.Caliper *= pooled
		opts.CaliperScale = CaliperAbsolute
	}
	m, err := matchOnScores(mat.NewDense(len(et), 1, et), mat.NewDense(len(ec), 1, ec), opts)
	if err != nil {
		return nil, err
	}
	m.Propensity = fit
	return m, nil
}
