package match

import (
	"errors"
	"math"
	"math/rand/v2"
	"strconv"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/reftest"
	"gonum.org/v1/gonum/mat"
)

// lalonde is the LaLonde (1986) job-training data as shipped in R's MatchIt
// 4.5.1 (data("lalonde"), 614 rows: 185 NSW treated, 429 PSID controls),
// exported to testdata/lalonde.csv by testdata/R/match_lalonde.R.
type lalonde struct {
	ids   []string
	treat []float64
	rows  []map[string]string
}

func loadLalonde(tb testing.TB) lalonde {
	tb.Helper()
	ref := reftest.Load(tb, "testdata/lalonde.csv")
	if len(ref.Rows) != 614 {
		tb.Fatalf("lalonde.csv has %d rows, want 614", len(ref.Rows))
	}
	l := lalonde{rows: ref.Rows}
	for i, r := range ref.Rows {
		l.ids = append(l.ids, r["id"])
		l.treat = append(l.treat, ref.Num(tb, i, "treat"))
	}
	return l
}

// design returns the covariate matrix for rows where keep(treat) holds. A
// column name "race=X" is the 0/1 indicator of race X.
func (l lalonde) design(tb testing.TB, cols []string, keep func(treat float64) bool) (*mat.Dense, []string) {
	tb.Helper()
	var data []float64
	var ids []string
	for i, r := range l.rows {
		if !keep(l.treat[i]) {
			continue
		}
		ids = append(ids, l.ids[i])
		for _, c := range cols {
			if len(c) > 5 && c[:5] == "race=" {
				v := 0.0
				if r["race"] == c[5:] {
					v = 1
				}
				data = append(data, v)
				continue
			}
			v, err := strconv.ParseFloat(r[c], 64)
			if err != nil {
				tb.Fatalf("lalonde %s %s: %v", l.ids[i], c, err)
			}
			data = append(data, v)
		}
	}
	return mat.NewDense(len(ids), len(cols), data), ids
}

func lalondeAll(float64) bool       { return true }
func lalondeTreated(t float64) bool { return t == 1 }
func lalondeControl(t float64) bool { return t == 0 }

// Source: R 4.2.2 glm(treat ~ age + educ + race + married + nodegree + re74 +
// re75, family = binomial, data = lalonde) from MatchIt 4.5.1, coefficients and
// standard errors in testdata/lalonde_glm.csv (testdata/R/match_lalonde.R),
// compared to a relative 1e-7 (they agree to about 1e-12 and 4e-9); log-likelihood −243.9219657 printed by the
// same script.
func TestFitLogitLalondeAgainstR(t *testing.T) {
	l := loadLalonde(t)
	cols := []string{"age", "educ", "race=hispan", "race=white", "married", "nodegree", "re74", "re75"}
	x, _ := l.design(t, cols, lalondeAll)
	fit, err := FitLogit(x, l.treat, LogitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	if !fit.Converged || fit.Separation {
		t.Fatalf("converged %v separation %v status %v", fit.Converged, fit.Separation, fit.Status)
	}
	ref := reftest.Load(t, "testdata/lalonde_glm.csv")
	if len(ref.Rows) != len(fit.Coef) {
		t.Fatalf("R has %d terms, fit %d", len(ref.Rows), len(fit.Coef))
	}
	for i := range ref.Rows {
		est, se := ref.Num(t, i, "estimate"), ref.Num(t, i, "se")
		if math.Abs(fit.Coef[i]-est) > 1e-7*math.Abs(est) {
			t.Errorf("%s: coefficient %.10g, R glm %.10g", ref.Rows[i]["term"], fit.Coef[i], est)
		}
		if math.Abs(fit.SE[i]-se) > 1e-7*se {
			t.Errorf("%s: SE %.10g, R glm %.10g", ref.Rows[i]["term"], fit.SE[i], se)
		}
	}
	if !(math.Abs(fit.LogLik-(-243.9219657)) <= 1e-6) {
		t.Errorf("log-likelihood %.10f, R logLik -243.9219657", fit.LogLik)
	}
}

func TestFitLogitBadInput(t *testing.T) {
	x := mat.NewDense(4, 1, []float64{1, 2, 3, 4})
	sep := mat.NewDense(6, 1, []float64{1, 2, 3, 4, 5, 6})
	cases := []struct {
		name string
		x    *mat.Dense
		y    []float64
	}{
		{"length", x, []float64{0, 1, 0}},
		{"not binary", x, []float64{0, 1, 2, 0}},
		{"constant outcome", x, []float64{1, 1, 1, 1}},
		{"NaN covariate", mat.NewDense(4, 1, []float64{1, math.NaN(), 3, 4}), []float64{0, 1, 0, 1}},
		{"constant covariate", mat.NewDense(4, 1, []float64{2, 2, 2, 2}), []float64{0, 1, 0, 1}},
		// Complete separation: y = 1 exactly when x > 3, so no MLE exists.
		{"separation", sep, []float64{0, 0, 0, 1, 1, 1}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := FitLogit(c.x, c.y, LogitOptions{MaxIterations: 50})
			if !errors.Is(err, ErrModel) {
				t.Fatalf("got %v, want ErrModel", err)
			}
		})
	}
}

// Source: R 4.2.2 MatchIt 4.5.1 matchit(treat ~ age + educ + re74 + re75, data =
// lalonde, distance = "mahalanobis", replace = TRUE, ratio = 1): matched
// control per treated unit (m$match.matrix) in testdata/lalonde_match.csv and
// weights (m$weights) in testdata/lalonde_weights.csv, written by
// testdata/R/match_lalonde.R. 22 treated units have tied nearest controls
// (identical covariates); MatchIt takes the first in data order, as we do.
func TestMatchNearestLalondeAgainstMatchIt(t *testing.T) {
	l := loadLalonde(t)
	cols := []string{"age", "educ", "re74", "re75"}
	xt, tids := l.design(t, cols, lalondeTreated)
	xc, cids := l.design(t, cols, lalondeControl)
	m, err := Nearest(xt, xc, Options{K: 1})
	if err != nil {
		t.Fatal(err)
	}
	if m.Rank != 4 || len(m.Dropped) != 0 {
		t.Fatalf("rank %d dropped %v", m.Rank, m.Dropped)
	}
	// The pooled within-group covariance agrees with MatchIt:::pooled_cov.
	cov := pooledCovariance(xt, xc)
	covRef := reftest.Load(t, "testdata/lalonde_cov.csv")
	for i := range 4 {
		for j, c := range cols {
			if want := covRef.Num(t, i, c); math.Abs(cov.At(i, j)-want) > 1e-9*math.Abs(want) {
				t.Errorf("cov[%d][%d] = %.10g, MatchIt pooled_cov %.10g", i, j, cov.At(i, j), want)
			}
		}
	}
	ref := reftest.Load(t, "testdata/lalonde_match.csv")
	if len(ref.Rows) != len(tids) {
		t.Fatalf("R matched %d treated, we have %d", len(ref.Rows), len(tids))
	}
	for i, r := range ref.Rows {
		if r["treated"] != tids[i] {
			t.Fatalf("row %d: treated %s, R %s", i, tids[i], r["treated"])
		}
		got := m.Matches[i]
		if len(got) != 1 {
			t.Fatalf("%s: %d matches", tids[i], len(got))
		}
		if cids[got[0].Control] != r["control"] {
			t.Errorf("%s: matched %s, MatchIt %s (ties %s)", tids[i], cids[got[0].Control], r["control"], r["ties"])
		}
		if want := ref.Num(t, i, "dist"); math.Abs(got[0].Distance-want) > 1e-9 {
			t.Errorf("%s: distance %.12g, R mahalanobis %.12g", tids[i], got[0].Distance, want)
		}
	}
	// MatchIt's control weights are ours rescaled to sum to the number of
	// distinct matched controls (101 here, per summary(m)).
	used, sum := 0, 0.0
	for _, w := range m.ControlWeights {
		if w > 0 {
			used++
			sum += w
		}
	}
	if used != 101 || sum != 185 {
		t.Fatalf("%d controls used with weight sum %v; MatchIt reports 101 matched controls, 185 treated", used, sum)
	}
	wref := reftest.Load(t, "testdata/lalonde_weights.csv")
	wByID := map[string]float64{}
	for i, r := range wref.Rows {
		wByID[r["id"]] = wref.Num(t, i, "weight")
	}
	for c, id := range cids {
		if got, want := m.ControlWeights[c]*float64(used)/sum, wByID[id]; math.Abs(got-want) > 1e-9 {
			t.Errorf("%s: weight %.10g, MatchIt %.10g", id, got, want)
		}
	}

	// Balance: MatchIt's "Std. Mean Diff." (treated SD) from summary(m), and
	// the pooled-SD SMD (Austin 2009) evaluated in R on MatchIt's means, in
	// testdata/lalonde_balance.csv.
	bal, err := Balance(cols, xt, xc, m)
	if err != nil {
		t.Fatal(err)
	}
	bref := reftest.Load(t, "testdata/lalonde_balance.csv")
	for i, b := range bal {
		if bref.Rows[i]["covariate"] != b.Name {
			t.Fatalf("row %d: %s vs R %s", i, b.Name, bref.Rows[i]["covariate"])
		}
		check := func(what string, got float64, col string) {
			if want := bref.Num(t, i, col); math.Abs(got-want) > 1e-8*math.Max(1, math.Abs(want)) {
				t.Errorf("%s %s = %.10g, R %s %.10g", b.Name, what, got, col, want)
			}
		}
		check("mean treated", b.MeanTreated, "mean_t_all")
		check("mean control", b.MeanControl, "mean_c_all")
		check("matched mean treated", b.MatchedMeanTreated, "mean_t_matched")
		check("matched mean control", b.MatchedMeanControl, "mean_c_matched")
		check("treated-SD SMD", b.TreatedSMD, "smd_all")
		check("matched treated-SD SMD", b.MatchedTreatedSMD, "smd_matched")
		check("pooled SMD", b.SMD, "smd_pooled_all")
		check("matched pooled SMD", b.MatchedSMD, "smd_pooled_matched")
	}
	// The 0.1 flag (Austin 2009): before matching age, re74 and re75 exceed
	// it; after matching none does.
	wantBefore := map[string]bool{"age": true, "educ": false, "re74": true, "re75": true}
	for _, b := range bal {
		if b.Imbalanced != wantBefore[b.Name] || b.MatchedImbalanced {
			t.Errorf("%s: flags before %v after %v (SMD %.4f → %.4f)", b.Name, b.Imbalanced, b.MatchedImbalanced, b.SMD, b.MatchedSMD)
		}
	}
}

// A caliper of 0 SD-units is "none"; a tiny absolute caliper drops exactly the
// treated units whose nearest control is farther, checked against the
// uncalipered distances (a property, not an outside source).
func TestMatchCaliperDrops(t *testing.T) {
	l := loadLalonde(t)
	cols := []string{"age", "educ", "re74", "re75"}
	xt, _ := l.design(t, cols, lalondeTreated)
	xc, _ := l.design(t, cols, lalondeControl)
	free, err := Nearest(xt, xc, Options{K: 3})
	if err != nil {
		t.Fatal(err)
	}
	const cal = 0.15
	m, err := Nearest(xt, xc, Options{K: 3, Caliper: cal, CaliperScale: CaliperAbsolute})
	if err != nil {
		t.Fatal(err)
	}
	var want []int
	for i, ms := range free.Matches {
		if ms[0].Distance > cal {
			want = append(want, i)
		}
		kept := 0
		for _, x := range ms {
			if x.Distance <= cal {
				kept++
			}
		}
		if len(m.Matches[i]) != kept {
			t.Errorf("treated %d keeps %d controls, want %d", i, len(m.Matches[i]), kept)
		}
	}
	if len(want) == 0 || len(want) == len(free.Matches) {
		t.Fatalf("caliper %v drops %d of %d; pick another", cal, len(want), len(free.Matches))
	}
	if len(m.Dropped) != len(want) {
		t.Fatalf("dropped %d, want %d", len(m.Dropped), len(want))
	}
	for i := range want {
		if m.Dropped[i] != want[i] {
			t.Fatalf("dropped %v, want %v", m.Dropped, want)
		}
	}
	sum := 0.0
	for _, w := range m.ControlWeights {
		sum += w
	}
	if !(math.Abs(sum-float64(len(free.Matches)-len(want))) <= 1e-9) {
		t.Errorf("control weights sum to %v, want the %d kept treated", sum, len(free.Matches)-len(want))
	}
	// In SD units the caliper is PairSD times the number given.
	sd, err := Nearest(xt, xc, Options{K: 3, Caliper: 0.05})
	if err != nil {
		t.Fatal(err)
	}
	if !(math.Abs(sd.Caliper-0.05*sd.PairSD) <= 1e-12) || sd.PairSD <= 0 {
		t.Errorf("SD caliper %v with pair SD %v", sd.Caliper, sd.PairSD)
	}
}

// A duplicated covariate makes the covariance singular; the pseudo-inverse
// must give the same distances as the non-singular problem without the
// duplicate (the Mahalanobis distance with S⁺ ignores the null direction),
// checked against MatchIt's distances via the 4-covariate run.
func TestMatchSingularCovariance(t *testing.T) {
	l := loadLalonde(t)
	xt, _ := l.design(t, []string{"age", "educ", "re74", "re75", "age"}, lalondeTreated)
	xc, _ := l.design(t, []string{"age", "educ", "re74", "re75", "age"}, lalondeControl)
	// x − y lies in the range of the singular S (both age columns move
	// together), where S⁺ acts as the inverse of the 4-covariate matrix, so the
	// distances equal MatchIt's 4-covariate ones.
	m5, err := Nearest(xt, xc, Options{K: 1})
	if err != nil {
		t.Fatal(err)
	}
	if m5.Rank != 4 {
		t.Fatalf("rank %d, want 4", m5.Rank)
	}
	ref := reftest.Load(t, "testdata/lalonde_match.csv")
	for i := range ref.Rows {
		if want := ref.Num(t, i, "dist"); math.Abs(m5.Matches[i][0].Distance-want) > 1e-6 {
			t.Errorf("treated %d: distance %.9g with singular covariance, MatchIt (4 covariates) %.9g", i, m5.Matches[i][0].Distance, want)
		}
	}
}

func TestMatchBadInput(t *testing.T) {
	a := mat.NewDense(2, 2, []float64{1, 2, 3, 4})
	b := mat.NewDense(3, 2, []float64{1, 2, 3, 5, 2, 2})
	cases := []struct {
		name string
		t, c *mat.Dense
		opts Options
	}{
		{"columns", a, mat.NewDense(2, 3, nil), Options{}},
		{"NaN", mat.NewDense(1, 2, []float64{1, math.NaN()}), b, Options{}},
		{"K above controls", a, b, Options{K: 4}},
		{"negative caliper", a, b, Options{Caliper: -1}},
		{"nil", nil, b, Options{}},
		{"constant", a, mat.NewDense(2, 2, []float64{1, 2, 1, 2}), Options{}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if c.name == "constant" {
				c.t = mat.NewDense(2, 2, []float64{1, 2, 1, 2})
			}
			if _, err := Nearest(c.t, c.c, c.opts); !errors.Is(err, ErrMatch) {
				t.Errorf("got %v, want ErrMatch", err)
			}
		})
	}
}

// Propensity matching on the logit: with a 0.2-SD caliper (Austin 2011) the
// matched SMD of the score itself must shrink; each match is the control with
// the nearest logit, which is checked by brute force.
func TestPropensityMatchLalonde(t *testing.T) {
	l := loadLalonde(t)
	cols := []string{"age", "educ", "race=hispan", "race=white", "married", "nodegree", "re74", "re75"}
	x, _ := l.design(t, cols, lalondeAll)
	fit, err := FitLogit(x, l.treat, LogitOptions{})
	if err != nil {
		t.Fatal(err)
	}
	xt, _ := l.design(t, cols, lalondeTreated)
	xc, _ := l.design(t, cols, lalondeControl)
	m, err := OnPropensity(fit, xt, xc, Options{K: 1, Caliper: 0.2})
	if err != nil {
		t.Fatal(err)
	}
	// Propensity refits the same model on the stacked rows: same
	// coefficients as R's glm (testdata/lalonde_glm.csv), same matches.
	pm, err := Propensity(xt, xc, Options{K: 1, Caliper: 0.2})
	if err != nil {
		t.Fatal(err)
	}
	ref := reftest.Load(t, "testdata/lalonde_glm.csv")
	for i := range ref.Rows {
		if est := ref.Num(t, i, "estimate"); math.Abs(pm.Propensity.Coef[i]-est) > 1e-4*math.Abs(est) {
			t.Errorf("%s: Propensity coefficient %.10g, R glm %.10g", ref.Rows[i]["term"], pm.Propensity.Coef[i], est)
		}
	}
	for i := range m.Matches {
		if len(m.Matches[i]) != len(pm.Matches[i]) || len(m.Matches[i]) > 0 && m.Matches[i][0].Control != pm.Matches[i][0].Control {
			t.Errorf("treated %d: OnPropensity %v, Propensity %v", i, m.Matches[i], pm.Matches[i])
		}
	}
	et, _ := fit.LinearPredictor(xt)
	ec, _ := fit.LinearPredictor(xc)
	for i, ms := range m.Matches {
		if len(ms) == 0 {
			continue
		}
		bestD := math.Inf(1)
		for _, v := range ec {
			bestD = math.Min(bestD, math.Abs(et[i]-v))
		}
		if ms[0].Distance != bestD || math.Abs(et[i]-ec[ms[0].Control]) != bestD {
			t.Errorf("treated %d: distance %v, brute force %v", i, ms[0].Distance, bestD)
		}
		if ms[0].Distance > m.Caliper {
			t.Errorf("treated %d outside caliper", i)
		}
	}
	bal, err := Balance([]string{"logit"}, mat.NewDense(len(et), 1, et), mat.NewDense(len(ec), 1, ec), m)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(bal[0].MatchedSMD) >= math.Abs(bal[0].SMD) || bal[0].MatchedImbalanced {
		t.Errorf("logit SMD %.3f before, %.3f after matching", bal[0].SMD, bal[0].MatchedSMD)
	}
}

func BenchmarkMatchNearest(b *testing.B) {
	const nt, nc, p = 200, 2000, 6
	rng := rand.New(rand.NewPCG(7, 11))
	fill := func(n int, shift float64) *mat.Dense {
		d := make([]float64, n*p)
		for i := range d {
			d[i] = rng.NormFloat64() + shift
		}
		return mat.NewDense(n, p, d)
	}
	xt, xc := fill(nt, 0.3), fill(nc, 0)
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Nearest(xt, xc, Options{K: 3, Caliper: 0.2}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(nt)*float64(b.N)/b.Elapsed().Seconds(), "treated/s")
}

// Source: R 4.2.2 stats::mahalanobis with cov() of the 429 LaLonde controls,
// nearest control per treated unit by which.min (first in data order on ties),
// in testdata/lalonde_match_ctrlcov.csv (testdata/R/match_lalonde.R).
func TestMatchNearestControlCovarianceAgainstR(t *testing.T) {
	l := loadLalonde(t)
	cols := []string{"age", "educ", "re74", "re75"}
	xt, tids := l.design(t, cols, lalondeTreated)
	xc, cids := l.design(t, cols, lalondeControl)
	m, err := Nearest(xt, xc, Options{K: 1, Covariance: CovControls})
	if err != nil {
		t.Fatal(err)
	}
	ref := reftest.Load(t, "testdata/lalonde_match_ctrlcov.csv")
	for i, r := range ref.Rows {
		got := m.Matches[i][0]
		if r["treated"] != tids[i] || cids[got.Control] != r["control"] {
			t.Errorf("%s: matched %s, R %s", tids[i], cids[got.Control], r["control"])
		}
		if want := ref.Num(t, i, "dist"); math.Abs(got.Distance-want) > 1e-9 {
			t.Errorf("%s: distance %.12g, R %.12g", tids[i], got.Distance, want)
		}
	}
}
