package infer

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"sort"
)

// Assignment is a treatment assignment: unit Units[i] starts treatment in
// period Starts[i]. Units are the caller's ids.
type Assignment struct {
	Units  []int
	Starts []int
}

// Alternative is the direction a randomization p-value looks in.
type Alternative int

const (
	// TwoSided counts reassignments with |S| ≥ |S_obs|; it suits statistics
	// centred at zero under the null, such as an effect estimate.
	TwoSided Alternative = iota
	// Greater counts reassignments with S ≥ S_obs.
	Greater
	// Less counts reassignments with S ≤ S_obs.
	Less
)

// RandomizationOptions configures Randomization. The zero value enumerates
// up to 20000 reassignments, otherwise draws 9999 at random, two-sided, seed 0.
type RandomizationOptions struct {
	// MaxExact is the largest number of distinct reassignments enumerated
	// (20000 when 0).
	MaxExact int
	// Draws is the number of random reassignments when there are more
	// (9999 when 0).
	Draws       int
	Alternative Alternative
	// Seed seeds a PCG generator when Rand is nil.
	Seed uint64
	// Rand, when not nil, is used instead of Seed, from the calling goroutine.
	Rand *rand.Rand
}

// RandomizationResult is the outcome of a randomization test.
type RandomizationResult struct {
	Observed float64 // the statistic under the observed assignment
	// P is the p-value: Extreme/Evaluated when Exact, else
	// (1 + Extreme)/(1 + Evaluated).
	P     float64
	Exact bool
	// Reassignments is the number of distinct reassignments, C(n, k) times
	// the distinct orderings of the start periods (a float64: it can be huge).
	Reassignments float64
	Evaluated     int       // statistics computed besides the observed one (all of them when Exact)
	Extreme       int       // of those, how many were at least as extreme as Observed
	Stats         []float64 // the statistic of each evaluated reassignment, in evaluation order
}

// Randomization tests Fisher's sharp null that treatment changed no unit's
// outcome in any period, so that every outcome is what it would have been
// under any other assignment, by re-dealing the treatment.
//
// pool lists every unit that could have been treated (the observed treated
// units and the eligible controls, distinct). A reassignment picks
// len(observed.Units) units from the pool and gives them the observed start
// periods in some order; stat computes the test statistic from the outcomes
// as observed, pretending that assignment had happened. Under the sharp null
// and an assignment that was as good as random among these, each
// reassignment is equally likely, so the rank of the observed statistic
// gives an exact p-value (Fisher 1935; Imbens & Rubin 2015, Causal
// Inference, ch. 5). It stays valid with one treated unit, where no
// interval is reliable, but its resolution is 1/Reassignments: with one
// treated unit among 19 eligible the smallest p-value is 0.05. What it
// tests is "no effect anywhere", not "zero average effect"; with
// heterogeneous effects or units that differ systematically from the
// treated ones in trend it is not exact (Conley & Taber 2011 discuss the
// needed exchangeability).
//
// When the distinct reassignments number at most MaxExact they are all
// evaluated (the observed one among them) and P = Extreme/Reassignments;
// otherwise Draws reassignments are drawn uniformly with replacement and
// P = (1 + Extreme)/(1 + Draws), which is a valid p-value for any number of
// draws (Davison & Hinkley 1997, Bootstrap Methods and their Application, ch. 4). Ties within a
// relative 1e-9 count as extreme. An error from stat, or a NaN statistic,
// stops the test with an error naming the reassignment. ctx is checked every
// 64 statistics.
func Randomization(ctx context.Context, stat func(Assignment) (float64, error), pool []int, observed Assignment, o RandomizationOptions) (*RandomizationResult, error) {
	k := len(observed.Units)
	n := len(pool)
	switch {
	case stat == nil:
		return nil, fmt.Errorf("%w: no statistic", ErrRequest)
	case k == 0:
		return nil, fmt.Errorf("%w: no treated unit", ErrRequest)
	case len(observed.Starts) != k:
		return nil, fmt.Errorf("%w: %d start periods for %d treated units", ErrRequest, len(observed.Starts), k)
	case k >= n:
		return nil, fmt.Errorf("%w: %d treated units in a pool of %d: nothing to reassign", ErrRequest, k, n)
	case o.Alternative < TwoSided || o.Alternative > Less:
		return nil, fmt.Errorf("%w: unknown alternative %d", ErrRequest, o.Alternative)
	case o.MaxExact < 0 || o.Draws < 0:
		return nil, fmt.Errorf("%w: negative MaxExact or Draws", ErrRequest)
	}
	seen := make(map[int]bool, n)
	for i, u := range pool {
		if seen[u] {
			return nil, fmt.Errorf("%w: unit %d twice in the pool (position %d)", ErrRequest, u, i)
		}
		seen[u] = true
	}
	treated := make(map[int]bool, k)
	for i, u := range observed.Units {
		if !seen[u] {
			return nil, fmt.Errorf("%w: treated unit %d (position %d) is not in the pool", ErrRequest, u, i)
		}
		if treated[u] {
			return nil, fmt.Errorf("%w: treated unit %d twice (position %d)", ErrRequest, u, i)
		}
		treated[u] = true
	}
	if o.MaxExact == 0 {
		o.MaxExact = 20000
	}
	if o.Draws == 0 {
		o.Draws = 9999
	}
	if o.Rand == nil {
		o.Rand = rand.New(rand.NewPCG(o.Seed, 0x2545f4914f6cdd1d))
	}
	s0, err := stat(observed)
	if err != nil {
		return nil, fmt.Errorf("infer: statistic of the observed assignment: %w", err)
	}
	if math.IsNaN(s0) {
		return nil, fmt.Errorf("%w: statistic of the observed assignment is NaN", ErrRequest)
	}
	starts := slices.Clone(observed.Starts)
	sort.Ints(starts)
	res := &RandomizationResult{Observed: s0, Reassignments: permCount(n, starts)}
	tau := 1e-9 * math.Abs(s0)
	extreme := func(s float64) bool {
		switch o.Alternative {
		case Greater:
			return s >= s0-tau
		case Less:
			return s <= s0+tau
		}
		return math.Abs(s) >= math.Abs(s0)-tau
	}
	eval := func(a Assignment) error {
		if len(res.Stats)%64 == 0 {
			if err := ctx.Err(); err != nil {
				return fmt.Errorf("infer: randomization test after %d reassignments: %w", len(res.Stats), err)
			}
		}
		s, err := stat(a)
		if err == nil && math.IsNaN(s) {
			err = fmt.Errorf("%w: NaN statistic", ErrRequest)
		}
		if err != nil {
			return fmt.Errorf("infer: statistic of reassignment %d (units %v, starts %v): %w", len(res.Stats), a.Units, a.Starts, err)
		}
		res.Stats = append(res.Stats, s)
		if extreme(s) {
			res.Extreme++
		}
		return nil
	}
	if res.Reassignments <= float64(o.MaxExact) {
		res.Exact = true
		if err := permEnumerate(pool, starts, eval); err != nil {
			return nil, err
		}
		res.Evaluated = len(res.Stats)
		res.P = float64(res.Extreme) / float64(res.Evaluated)
		return res, nil
	}
	idx := make([]int, n)
	for range o.Draws {
		for i := range idx {
			idx[i] = i
		}
		a := Assignment{Units: make([]int, k), Starts: slices.Clone(starts)}
		for i := range k { // partial Fisher–Yates: a uniform k-subset in random order
			j := i + o.Rand.IntN(n-i)
			idx[i], idx[j] = idx[j], idx[i]
			a.Units[i] = pool[idx[i]]
		}
		if err := eval(a); err != nil {
			return nil, err
		}
	}
	res.Evaluated = len(res.Stats)
	res.P = float64(1+res.Extreme) / float64(1+res.Evaluated)
	return res, nil
}

// permCount returns C(n, k) times the number of distinct orderings of the
// sorted start periods, k!/Π m_s!.
func permCount(n int, starts []int) float64 {
	k := len(starts)
	c := 1.0
	for i := range k {
		c = c * float64(n-i) / float64(i+1)
	}
	perm := 1.0
	run := 0
	for i := range k {
		perm *= float64(i + 1)
		if i > 0 && starts[i] == starts[i-1] {
			run++
		} else {
			run = 1
		}
		perm /= float64(run)
	}
	return math.Round(c * perm)
}

// permEnumerate calls fn for every k-subset of pool (k = len(starts)) and
// every distinct ordering of the sorted starts over it.
func permEnumerate(pool, starts []int, fn func(Assignment) error) error {
	n, k := len(pool), len(starts)
	comb := make([]int, k)
	for i := range comb {
		comb[i] = i
	}
	for {
		perm := slices.Clone(starts)
		for {
			a := Assignment{Units: make([]int, k), Starts: slices.Clone(perm)}
			for i, c := range comb {
				a.Units[i] = pool[c]
			}
			if err := fn(a); err != nil {
				return err
			}
			if !permNext(perm) {
				break
			}
		}
		// next combination in lexicographic order
		i := k - 1
		for i >= 0 && comb[i] == n-k+i {
			i--
		}
		if i < 0 {
			return nil
		}
		comb[i]++
		for j := i + 1; j < k; j++ {
			comb[j] = comb[j-1] + 1
		}
	}
}

// permNext rearranges p into the next lexicographic permutation, skipping
// duplicates, and reports false after the last one.
func permNext(p []int) bool {
	i := len(p) - 2
	for i >= 0 && p[i] >= p[i+1] {
		i--
	}
	if i < 0 {
		return false
	}
	j := len(p) - 1
	for p[j] <= p[i] {
		j--
	}
	p[i], p[j] = p[j], p[i]
	slices.Reverse(p[i+1:])
	return true
}
