package rollout

import (
	"cmp"
	"errors"
	"fmt"
	"math/rand/v2"
	"slices"
)

// ErrPlan is the sentinel under errors that make a plan impossible.
var ErrPlan = errors.New("rollout: cannot plan")

// assignStream is the PCG stream of the assignment's random numbers: with
// the seed it fixes every draw, so a plan can be drawn again.
const assignStream = 0x726f6c6c6f7574

// Procedure names the assignment procedure in plans and pre-registrations.
const Procedure = "stratified-permutation/1"

// Assign deals n units to waves 0..waves−1 at random, stratified by
// activity and blocked by block (nil: one block): within each block
// (blocks in sorted order), units are ordered by activity (ties by their
// index) and cut into strata of waves consecutive units; each full stratum
// gets a random permutation of the waves, and the last, smaller stratum of a
// block a random set of distinct waves. Every unit thus lands in each wave
// with probability 1/waves, and units of like activity are spread over the
// waves. The random numbers come from PCG(seed, assignStream) in that order:
// the same inputs and seed give the same waves.
func Assign(activity []float64, block []string, waves int, seed uint64) ([]int, error) {
	n := len(activity)
	switch {
	case waves < 2:
		return nil, fmt.Errorf("%w: %d waves; at least 2 are needed (the last is the comparison)", ErrPlan, waves)
	case n < waves:
		return nil, fmt.Errorf("%w: %d units cannot fill %d waves", ErrPlan, n, waves)
	case block != nil && len(block) != n:
		return nil, fmt.Errorf("%w: %d blocks for %d units", ErrPlan, len(block), n)
	}
	rng := rand.New(rand.NewPCG(seed, assignStream))
	byBlock := map[string][]int{}
	for i := range n {
		b := ""
		if block != nil {
			b = block[i]
		}
		byBlock[b] = append(byBlock[b], i)
	}
	names := make([]string, 0, len(byBlock))
	for b := range byBlock {
		names = append(names, b)
	}
	slices.Sort(names)
	out := make([]int, n)
	for _, b := range names {
		idx := byBlock[b]
		slices.SortStableFunc(idx, func(x, y int) int { return cmp.Compare(activity[x], activity[y]) })
		for s := 0; s < len(idx); s += waves {
			stratum := idx[s:min(s+waves, len(idx))]
			perm := rng.Perm(waves)
			for k, u := range stratum {
				out[u] = perm[k]
			}
		}
	}
	return out, nil
}
