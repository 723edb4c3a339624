package did

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"gonum.org/v1/gonum/stat/distuv"

	"github.com/loadwake/loadwake/audit/internal/simtest"
	"github.com/loadwake/loadwake/audit/panel"
)

// splitWorld draws invented panels whose planted effect differs by a unit
// trait: PerGroup treated units in each of len(Deltas) groups (starting in two
// waves, months 12 and 16), Controls untreated units, counts Poisson-gamma
// as the simulator's (unit level Gamma(2, mean 4), a unit-month Gamma(K, 1/K)
// multiplier, a shared trend with seasonality), the multiplier 1+Deltas[g]
// from a group-g unit's first treated month. The trait also shifts activity
// (group g's levels times 1 + g/2), as real traits do; trends stay parallel.
type splitWorld struct {
	PerGroup, Controls, Months int
	Deltas                     []float64
	K                          float64
}

func (w splitWorld) draw(seed uint64) (*panel.Panel, Grouping) {
	rng := rand.New(rand.NewPCG(seed, 1707))
	lev := distuv.Gamma{Alpha: 2, Beta: 0.5, Src: rng}
	noise := distuv.Gamma{Alpha: w.K, Beta: w.K, Src: rng}
	p := &panel.Panel{Start: time.Date(2030, 1, 1, 0, 0, 0, 0, time.UTC), Months: w.Months, Outcomes: []string{"attribute"}}
	g := Grouping{Trait: "trait"}
	var levels, deltas []float64
	for k, d := range w.Deltas {
		g.Groups = append(g.Groups, fmt.Sprintf("group %c", 'a'+k))
		for i := range w.PerGroup {
			p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("t%d-%d", k, i), FirstTreated: 12 + 4*(i%2), Weight: 1})
			levels, deltas = append(levels, lev.Rand()*(1+float64(k)/2)), append(deltas, d)
			g.Of = append(g.Of, k)
		}
	}
	for i := range w.Controls {
		p.Units = append(p.Units, panel.Unit{ID: fmt.Sprintf("c%d", i), FirstTreated: -1, Weight: 1})
		levels, deltas = append(levels, lev.Rand()), append(deltas, 0)
		g.Of = append(g.Of, -1)
	}
	y := make([]float64, len(p.Units)*w.Months)
	for u, un := range p.Units {
		for t := range w.Months {
			lam := levels[u] * (1 + 0.02*float64(t) + 0.3*math.Sin(2*math.Pi*float64(t)/12)) * noise.Rand()
			if un.FirstTreated >= 0 && t >= un.FirstTreated {
				lam *= 1 + deltas[u]
			}
			y[u*w.Months+t] = distuv.Poisson{Lambda: lam, Src: rng}.Rand()
		}
	}
	p.Y = [][]float64{y}
	return p, g
}

func splitOptions(draws int) Options {
	o := DefaultOptions()
	o.Window = Window{Pre: 12, Post: 12}
	o.Draws = draws
	return o
}

// TestEstimateByGroupsRecovers: on invented panels where the planted
// effect is −30% in one group and +10% in the other (12 treated units each),
// each group's mean estimate over 4 panels lies within 0.08 of its planted
// value (the coverage study in groups_validate_test.go gives the intervals'
// rate), and on one the interaction test finds the difference; the Holm-adjusted p-value
// of a family of one is the p-value itself. A grouping of the wrong length is
// refused.
func TestEstimateByGroupsRecovers(t *testing.T) {
	w := splitWorld{PerGroup: 12, Controls: 30, Months: 30, Deltas: []float64{-0.3, 0.1}, K: 8}
	mean := make([]float64, len(w.Deltas))
	for i := range 4 {
		p, g := w.draw(uint64(1000 + i))
		res, err := EstimateByGroups(context.Background(), p, []Grouping{g}, []string{"attribute"}, splitOptions(99))
		if err != nil {
			t.Fatal(err)
		}
		for k, ge := range res.Rows[0].Groups {
			mean[k] += ge.RelativeEffect / 4
		}
	}
	for k, m := range mean {
		t.Logf("group %c: planted %+.2f, mean estimate over 4 panels %+.3f", 'a'+k, w.Deltas[k], m)
		if math.Abs(m-w.Deltas[k]) > 0.08 {
			t.Errorf("group %c: mean estimate %+.3f more than 0.08 from the planted %+.2f", 'a'+k, m, w.Deltas[k])
		}
	}
	p, g := w.draw(11)
	res, err := EstimateByGroups(context.Background(), p, []Grouping{g}, []string{"attribute"}, splitOptions(199))
	if err != nil {
		t.Fatal(err)
	}
	if res.Declared != 1 || res.Tested != 1 || len(res.Rows) != 1 {
		t.Fatalf("declared %d, tested %d, rows %d", res.Declared, res.Tested, len(res.Rows))
	}
	sp := res.Rows[0]
	for _, ge := range sp.Groups {
		t.Logf("%s: %+.3f [%+.3f, %+.3f] p %.3f (%s)", ge.Group, ge.RelativeEffect, ge.CI95[0], ge.CI95[1], ge.PValue, ge.Method)
		if ge.TreatedUnits != 12 || ge.NoInterval {
			t.Errorf("%s: %d treated, no interval %v", ge.Group, ge.TreatedUnits, ge.NoInterval)
		}
	}
	if sp.DiffP == nil || *sp.DiffP >= 0.05 || sp.DiffPHolm == nil || *sp.DiffPHolm != *sp.DiffP {
		t.Fatalf("difference test %v, Holm %v (%s): want p < 0.05", sp.DiffP, sp.DiffPHolm, sp.Note)
	}
	t.Logf("difference p = %.4f (%s)", *sp.DiffP, sp.DiffMethod)
	g.Of = g.Of[1:]
	if _, err := EstimateByGroups(context.Background(), p, []Grouping{g}, []string{"attribute"}, splitOptions(199)); err == nil {
		t.Error("a grouping shorter than the panel was accepted")
	}
}

// TestEstimateByGroupsFewTreated: with 3 treated units in a group no
// difference test is made (the headline needs 4 treated areas for any test)
// and the group's own effect carries the randomization test, no interval.
func TestEstimateByGroupsFewTreated(t *testing.T) {
	w := splitWorld{PerGroup: 3, Controls: 20, Months: 30, Deltas: []float64{-0.3, 0.1}, K: 8}
	p, g := w.draw(5)
	res, err := EstimateByGroups(context.Background(), p, []Grouping{g}, []string{"attribute"}, splitOptions(199))
	if err != nil {
		t.Fatal(err)
	}
	sp := res.Rows[0]
	if sp.DiffP != nil || res.Tested != 0 {
		t.Errorf("difference tested with 3 treated per group: p %v", *sp.DiffP)
	}
	for _, ge := range sp.Groups {
		if !ge.NoInterval {
			t.Errorf("%s: interval with 3 treated units (%s)", ge.Group, ge.Method)
		}
	}
	t.Logf("note: %s", sp.Note)
}

// splitStudy runs EstimateByGroups on n panels of w and counts how often each
// group's 95% interval holds its planted value and how often the difference
// test rejects at 5%.
func splitStudy(tb testing.TB, w splitWorld, n, draws int) (cover []int, reject, tested int) {
	tb.Helper()
	cover = make([]int, len(w.Deltas))
	for i := range n {
		p, g := w.draw(uint64(1000 + i))
		res, err := EstimateByGroups(context.Background(), p, []Grouping{g}, []string{"attribute"}, splitOptions(draws))
		if err != nil {
			tb.Fatal(err)
		}
		sp := res.Rows[0]
		for k, ge := range sp.Groups {
			if !ge.NoInterval && ge.CI95[0] <= w.Deltas[k] && w.Deltas[k] <= ge.CI95[1] {
				cover[k]++
			}
		}
		if sp.DiffP != nil {
			tested++
			if *sp.DiffP < 0.05 {
				reject++
			}
		}
	}
	return cover, reject, tested
}

// TestSplitSizeQuick is the quick version of the size study
// (groups_validate_test.go): on a few null panels the difference test rarely
// rejects. It only guards against a grossly wrong test; the figures come from
// the long study.
func TestSplitSizeQuick(t *testing.T) {
	if simtest.Validate {
		t.Skip("the long study runs instead")
	}
	w := splitWorld{PerGroup: 4, Controls: 12, Months: 24, Deltas: []float64{-0.2, -0.2}, K: 8}
	cover, reject, tested := splitStudy(t, w, 6, 99)
	t.Logf("6 null panels: %d of %d tests reject; coverage %v", reject, tested, cover)
	if tested != 6 || reject > 2 {
		t.Errorf("%d of %d null tests reject at 5%%", reject, tested)
	}
}
