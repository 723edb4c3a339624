package survival

import (
	"context"
	"math"
	"path/filepath"
	"strconv"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/loadwake/loadwake/audit/internal/reftest"
)

// lung is the lung data of R's survival package (testdata/README.md).
type lung struct {
	inst, sex, ecog []int
	time            []float64
	event           []bool
	age, karno      []float64
}

func loadLung(tb testing.TB) lung {
	tb.Helper()
	t := reftest.Load(tb, filepath.Join("testdata", "lung.csv"))
	var l lung
	for i := 0; i < t.Len(); i++ {
		l.inst = append(l.inst, int(t.Num(tb, i, "inst")))
		l.time = append(l.time, t.Num(tb, i, "time"))
		l.event = append(l.event, t.Num(tb, i, "event") == 1)
		l.age = append(l.age, t.Num(tb, i, "age"))
		l.sex = append(l.sex, int(t.Num(tb, i, "sex")))
		l.ecog = append(l.ecog, int(t.Num(tb, i, "ph.ecog")))
		l.karno = append(l.karno, t.Num(tb, i, "ph.karno"))
	}
	return l
}

// refValues reads testdata/R/ref.csv: values from R's survival 3.5-3.
func refValues(tb testing.TB) func(string) float64 {
	tb.Helper()
	t := reftest.Load(tb, filepath.Join("testdata", "R", "ref.csv"))
	out := map[string]float64{}
	for i := 0; i < t.Len(); i++ {
		out[t.Str(tb, i, "name")] = t.Num(tb, i, "value")
	}
	return func(name string) float64 {
		v, ok := out[name]
		if !ok {
			tb.Fatalf("testdata/R/ref.csv has no value %q", name)
		}
		return v
	}
}

func near(tb testing.TB, name string, got, want, tol float64) {
	tb.Helper()
	if math.Abs(got-want) > tol*math.Max(1, math.Abs(want)) {
		tb.Errorf("%s = %.10g, want %.10g (R survival 3.5-3, testdata/R/ref.csv)", name, got, want)
	}
}

func TestKaplanMeierLung(t *testing.T) {
	l, ref := loadLung(t), refValues(t)
	c, err := KaplanMeier(l.time, l.event)
	if err != nil {
		t.Fatal(err)
	}
	for _, at := range []float64{100, 200, 365, 500, 730} {
		t.Run(strconv.Itoa(int(at)), func(t *testing.T) {
			p := c.At(at, 0.95)
			k := strconv.Itoa(int(at))
			// survfit(Surv(time, event) ~ 1, conf.type = "log-log") and summary(, times =).
			near(t, "surv", p.Surv, ref("km.surv."+k), 1e-9)
			near(t, "se", p.SE, ref("km.se."+k), 1e-9)
			near(t, "lower", p.Lower, ref("km.lower."+k), 1e-9)
			near(t, "upper", p.Upper, ref("km.upper."+k), 1e-9)
			near(t, "n.risk", float64(p.NRisk), ref("km.nrisk."+k), 0)
		})
	}
	m, ok := c.Median()
	if !ok {
		t.Fatal("no median")
	}
	near(t, "median", m, ref("km.median"), 0) // summary(km)$table["median"]
}

func TestLogRankLung(t *testing.T) {
	l, ref := loadLung(t), refValues(t)
	group := make([]bool, len(l.sex))
	for i, s := range l.sex {
		group[i] = s == 2
	}
	tests := []struct {
		name   string
		strata []int
		chisq  string
	}{
		{"plain", nil, "logrank.chisq"},               // survdiff(Surv(time, event) ~ sex)
		{"by ph.ecog", l.ecog, "logrank.strat.chisq"}, // survdiff(... ~ sex + strata(ph.ecog))
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r, err := LogRank(l.time, l.event, group, tc.strata)
			if err != nil {
				t.Fatal(err)
			}
			near(t, "chisq", r.ChiSq, ref(tc.chisq), 1e-9)
			if tc.strata == nil {
				near(t, "observed sex 1", r.Observed[0], ref("logrank.obs1"), 0)
				near(t, "expected sex 1", r.Expected[0], ref("logrank.exp1"), 1e-9)
			}
		})
	}
}

func TestCoxLung(t *testing.T) {
	l, ref := loadLung(t), refValues(t)
	x := mat.NewDense(len(l.time), 3, nil)
	for i := range l.time {
		x.Set(i, 0, l.age[i])
		x.Set(i, 1, l.karno[i])
		x.Set(i, 2, float64(l.sex[i]))
	}
	tests := []struct {
		name    string
		ties    Ties
		strata  bool
		prefix  string
		seName  string // robust SE name in ref.csv; plain fits compare the model-based SE
		naiveSE string
	}{
		// coxph(Surv(time, event) ~ age + ph.karno + sex, ties = ...)
		{"efron", Efron, false, "cox.efron.", "", "se."},
		{"breslow", Breslow, false, "cox.breslow.", "", "se."},
		// coxph(... + strata(ph.ecog), cluster = inst, ties = ...)
		{"efron strata cluster", Efron, true, "cox.efron.strat.", "se.", "naivese."},
		{"breslow strata cluster", Breslow, true, "cox.breslow.strat.", "se.", "naivese."},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			d := CoxData{Time: l.time, Event: l.event, X: x}
			if tc.strata {
				d.Strata, d.Cluster = l.ecog, l.inst
			}
			f, err := Cox(context.Background(), d, CoxOptions{Ties: tc.ties})
			if err != nil {
				t.Fatal(err)
			}
			for j := 0; j < 3; j++ {
				k := strconv.Itoa(j + 1)
				near(t, "coef "+k, f.Coef[j], ref(tc.prefix+"coef."+k), 1e-6)
				near(t, "naive se "+k, f.NaiveSE[j], ref(tc.prefix+tc.naiveSE+k), 1e-6)
				if tc.seName != "" {
					near(t, "robust se "+k, f.SE[j], ref(tc.prefix+tc.seName+k), 1e-6)
				}
			}
			near(t, "loglik", f.LogLik, ref(tc.prefix+"loglik"), 1e-9)
		})
	}
}
