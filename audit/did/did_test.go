package did

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"strings"
	"testing"
	"time"

	"github.com/loadwake/loadwake/audit/infer"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/panel/paneltest"
)

// twoPeriodPanel builds a two-month panel from per-unit (before, after)
// values; treated units are first treated in month 1.
func twoPeriodPanel(treated, control [][2]float64) *panel.Panel {
	p := &panel.Panel{Start: time.Date(1992, 2, 1, 0, 0, 0, 0, time.UTC), Months: 2, Outcomes: []string{"y"}}
	var y []float64
	add := func(vals [][2]float64, ft int, tag string) {
		for i, v := range vals {
			p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("%s%d", tag, i), FirstTreated: ft, Weight: 1})
			y = append(y, v[0], v[1])
		}
	}
	add(treated, 1, "t")
	add(control, -1, "c")
	p.Y = [][]float64{y}
	return p
}

// TestDiD2x2CardKrueger reproduces the 2x2 difference-in-differences of Card &
// Krueger (1994, American Economic Review 84(4), Table 3; also Angrist &
// Pischke, Mostly Harmless Econometrics, Table 5.2.1): full-time-equivalent
// employment per store, Pennsylvania 23.33 before and 21.17 after, New Jersey
// 20.44 before and 21.03 after (cell means from memory). From these rounded
// means the DiD is 2.75; the published estimate is 2.76 (SE 1.36, from memory)
// because it uses unrounded means. The stores here are two per state spread
// symmetrically around the cell means, so only the point estimate is checked.
func TestDiD2x2CardKrueger(t *testing.T) {
	nj := [][2]float64{{20.44 - 1, 21.03 + 0.5}, {20.44 + 1, 21.03 - 0.5}, {20.44 - 2, 21.03 - 1}, {20.44 + 2, 21.03 + 1}}
	pa := [][2]float64{{23.33 - 1, 21.17 - 0.7}, {23.33 + 1, 21.17 + 0.7}, {23.33 + 3, 21.17}, {23.33 - 3, 21.17}}
	p := twoPeriodPanel(nj, pa)
	opts := DefaultOptions()
	opts.Inference = InferenceAnalytic
	cl, G := p.ClusterIndex()
	e, err := did2x2(context.Background(), p, p.Y[0], []int{1}, cl, G, opts, rand.New(rand.NewPCG(1, 2)))
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(e.att-2.75) > 1e-9 {
		t.Errorf("DiD %v, want 2.75 from the rounded cell means", e.att)
	}
	if math.Abs(e.att-2.76) > 0.015 {
		t.Errorf("DiD %v far from the published 2.76", e.att)
	}
	// The group-time estimator's only cell, ATT(1,1), is the same 2x2.
	cs, err := callawaySantAnna(p, p.Y[0], cl, G, opts, rand.New(rand.NewPCG(1, 2)), false)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(cs.overall.att-2.75) > 1e-9 {
		t.Errorf("cs-att %v, want 2.75", cs.overall.att)
	}
	// Relative effect: 2.75 / (21.03 − 2.75).
	if want := 2.75 / (21.03 - 2.75); math.Abs(cs.overall.rel-want) > 1e-9 {
		t.Errorf("relative effect %v, want %v", cs.overall.rel, want)
	}
}

// TestCSEqualsDiD2x2 checks on random two-period panels that the group-time
// estimator with one cohort and two months is exactly the 2x2 DiD (CS 2021,
// section 2: the 2x2 is the building block), and that its standard error is
// the two-sample one with each arm's own degrees of freedom. Random values:
// the identities must hold for any data.
func TestCSEqualsDiD2x2(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 7))
	for trial := range 20 {
		var tr, co [][2]float64
		for range 3 + rng.IntN(10) {
			tr = append(tr, [2]float64{rng.Float64() * 10, rng.Float64() * 10})
		}
		for range 3 + rng.IntN(10) {
			co = append(co, [2]float64{rng.Float64() * 10, rng.Float64() * 10})
		}
		p := twoPeriodPanel(tr, co)
		weighted := trial%2 == 1
		for i := range p.Units {
			if !p.Units[i].Treated() && weighted {
				p.Units[i].Weight = 0.5 + rng.Float64()
			}
		}
		opts := DefaultOptions()
		opts.Inference = InferenceAnalytic
		cl, G := p.ClusterIndex()
		d, err := did2x2(context.Background(), p, p.Y[0], []int{1}, cl, G, opts, rng)
		if err != nil {
			t.Fatal(err)
		}
		cs, err := callawaySantAnna(p, p.Y[0], cl, G, opts, rng, false)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(d.att-cs.overall.att) > 1e-10 {
			t.Errorf("trial %d: did-2x2 %v, cs-att %v", trial, d.att, cs.overall.att)
		}
		if weighted {
			continue
		}
		// One cohort, one pre and one post month, one unit per cluster: the
		// influence-function variance with the per-arm HC1 factors is the
		// unequal-variance two-sample variance of the mean changes,
		// s_T²/n_T + s_C²/n_C (Welch 1947; R's t.test(var.equal = FALSE)).
		welch := 0.0
		for _, arm := range [][][2]float64{tr, co} {
			m := 0.0
			for _, v := range arm {
				m += v[1] - v[0]
			}
			m /= float64(len(arm))
			ss := 0.0
			for _, v := range arm {
				ss += (v[1] - v[0] - m) * (v[1] - v[0] - m)
			}
			welch += ss / float64(len(arm)-1) / float64(len(arm))
		}
		if want := math.Sqrt(welch); math.Abs(cs.overall.se-want) > 1e-9*want {
			t.Errorf("trial %d: cs-att SE %v, Welch two-sample SE %v", trial, cs.overall.se, want)
		}
	}
}

func TestDiD2x2WildBootstrap(t *testing.T) {
	// Few clusters: the wild bootstrap must be chosen, with Webb weights below 12 clusters.
	p := twoPeriodPanel([][2]float64{{1, 5}, {2, 7}, {3, 6}, {2, 9}}, [][2]float64{{1, 2}, {3, 3}, {2, 4}, {4, 4}, {1, 1}})
	opts := DefaultOptions()
	cl, G := p.ClusterIndex()
	e, err := did2x2(context.Background(), p, p.Y[0], []int{1}, cl, G, opts, rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		t.Fatal(err)
	}
	if e.method != "wild-bootstrap-webb-999" {
		t.Errorf("method %q", e.method)
	}
	if !(e.lo < e.att && e.att < e.hi) || e.p <= 0 || e.p > 1 {
		t.Errorf("interval [%v, %v] around %v, p %v", e.lo, e.hi, e.att, e.p)
	}
	// The bootstrap-t interval with 9 clusters is wider than the normal one (common practice).
	if e.hi-e.lo <= 2*1.96*e.se {
		t.Errorf("bootstrap interval %v not wider than normal %v", e.hi-e.lo, 2*1.96*e.se)
	}
}

// TestLinearDesignForWild: the event study handed to the restricted wild
// bootstrap (unit effects absorbed, month dummies as columns) is the same
// regression as the closed-form two-way demeaning: equal coefficients and
// equal CR1 standard error of the mean of lags (Frisch–Waugh–Lovell; the
// same CR1 factor, K counting every fixed effect).
func TestLinearDesignForWild(t *testing.T) {
	w := paneltest.World{PerCohort: 6, Cohorts: []int{8, 11}, Controls: 9, Months: 18, Delta: 0.2}
	p := w.Panel(4)
	p.Units[len(p.Units)-1].Weight = 2.5
	win := Window{Pre: 4, Post: 6}
	d, err := newESDesign(p, win)
	if err != nil {
		t.Fatal(err)
	}
	cl, G := p.ClusterIndex()
	opts := DefaultOptions()
	opts.Window = win
	opts.Inference = InferenceAnalytic
	e, err := twfeEventStudy(context.Background(), d, p.Y[0], cl, G, opts, rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		t.Fatal(err)
	}
	f, err := infer.FitOLS(d.linearDesign(p.Y[0], cl))
	if err != nil {
		t.Fatal(err)
	}
	a := make([]float64, d.K)
	nPost := 0
	for _, ev := range d.cols {
		if ev >= 0 {
			nPost++
		}
	}
	for c, ev := range d.cols {
		if ev >= 0 {
			a[c] = 1 / float64(nPost)
		}
	}
	full := d.fullRestriction(a)
	att := 0.0
	for j, v := range full {
		att += v * f.Beta[j]
	}
	if math.Abs(att-e.att) > 1e-9*(1+math.Abs(e.att)) || math.Abs(f.SE(full)-e.se) > 1e-9*e.se {
		t.Errorf("design for the bootstrap: att %v se %v; closed form: att %v se %v", att, f.SE(full), e.att, e.se)
	}
	opts.Inference = InferenceBootstrap
	b, err := twfeEventStudy(context.Background(), d, p.Y[0], cl, G, opts, rand.New(rand.NewPCG(1, 1)))
	if err != nil {
		t.Fatal(err)
	}
	// One procedure: the interval excludes 0 exactly when p < 0.05.
	if excl := b.lo > 0 || b.hi < 0; excl != (b.p < 0.05) || !strings.HasPrefix(b.method, "wild-bootstrap-") || b.noInterval {
		t.Errorf("restricted wild bootstrap: [%v, %v], p %v, method %q", b.lo, b.hi, b.p, b.method)
	}
}
