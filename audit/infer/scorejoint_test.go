package infer

import (
	"context"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// TestJointScoreOneRestriction: with one restriction the joint statistic is
// the square of ScoreBootstrap's t at the same fit, and with every
// Rademacher vector enumerated (8 clusters) the two p-values are equal; the
// statistic does not depend on how the restriction is scaled. Invented
// scores.
func TestJointScoreOneRestriction(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	g, k := 8, 2
	sc := mat.NewDense(g, k, nil)
	for i := range g {
		for j := range k {
			sc.Set(i, j, rng.NormFloat64())
		}
	}
	h := mat.NewSymDense(k, []float64{4, 1, 1, 3})
	fit := ScoreFit{Scores: sc, Hessian: h, NObs: 100, NParams: 10}
	opts := DefaultScoreOptions()
	opts.Weights = ScoreRademacher
	a := []float64{1, -1}
	j, err := JointScoreTest(fit, mat.NewDense(1, k, a), opts)
	if err != nil {
		t.Fatal(err)
	}
	sb, err := ScoreBootstrap(context.Background(), func(context.Context, []float64, float64) (ScoreFit, error) { return fit, nil }, a, 0, 0, opts)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(j.Stat-sb.Stat*sb.Stat) > 1e-9*j.Stat || j.P != sb.P || !j.Enumerated || j.Draws != 256 {
		t.Errorf("joint S %.6g p %.4f (%d draws), score t² %.6g p %.4f", j.Stat, j.P, j.Draws, sb.Stat*sb.Stat, sb.P)
	}
	s2, err := JointScoreStat(fit, mat.NewDense(1, k, []float64{-3, 3}))
	if err != nil || math.Abs(s2-j.Stat) > 1e-9*j.Stat {
		t.Errorf("scaled restriction: S %.6g (%v), want %.6g", s2, err, j.Stat)
	}
	if _, err := JointScoreStat(fit, mat.NewDense(1, 3, nil)); err == nil {
		t.Error("a restriction of the wrong width was accepted")
	}
}
