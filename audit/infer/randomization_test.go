package infer

import (
	"context"
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/simtest"
)

// permToyStat is a statistic of an assignment on made-up outcomes: the mean
// over treated units of outcome[u] weighted by how long the unit was treated.
func permToyStat(outcome map[int]float64) func(Assignment) (float64, error) {
	return func(a Assignment) (float64, error) {
		s := 0.0
		for i, u := range a.Units {
			s += outcome[u] * float64(10-a.Starts[i])
		}
		return s/float64(len(a.Units)) - 12, nil
	}
}

func TestRandomizationExactAgainstEnumeration(t *testing.T) {
	pool := []int{11, 12, 13, 14, 15, 16, 17}
	outcome := map[int]float64{11: 0.3, 12: 2.5, 13: 1.1, 14: -0.7, 15: 4.0, 16: 0.2, 17: 1.9}
	stat := permToyStat(outcome)
	cases := []struct {
		name  string
		obs   Assignment
		alt   Alternative
		count float64
	}{
		{"one unit", Assignment{Units: []int{15}, Starts: []int{3}}, TwoSided, 7},
		{"two units, two starts", Assignment{Units: []int{12, 15}, Starts: []int{4, 2}}, Greater, 42},
		{"two units, same start", Assignment{Units: []int{12, 17}, Starts: []int{3, 3}}, Less, 21},
		{"three units, starts with a tie", Assignment{Units: []int{12, 15, 11}, Starts: []int{3, 5, 3}}, TwoSided, 105},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			res, err := Randomization(context.Background(), stat, pool, c.obs, RandomizationOptions{Alternative: c.alt})
			if err != nil {
				t.Fatal(err)
			}
			if !res.Exact || res.Reassignments != c.count || res.Evaluated != int(c.count) {
				t.Fatalf("exact %v, %v reassignments, %d evaluated; want %v", res.Exact, res.Reassignments, res.Evaluated, c.count)
			}
			// Oracle: every injective map of the treated slots to pool units,
			// deduplicated as sets of (unit, start) pairs.
			seen := map[string]bool{}
			var extreme, total int
			s0, _ := stat(c.obs)
			var walk func(used []int)
			walk = func(used []int) {
				if len(used) == len(c.obs.Starts) {
					a := Assignment{Units: used, Starts: c.obs.Starts}
					key := permKey(a)
					if seen[key] {
						return
					}
					seen[key] = true
					total++
					s, _ := stat(a)
					switch {
					case c.alt == Greater && s >= s0-1e-12,
						c.alt == Less && s <= s0+1e-12,
						c.alt == TwoSided && math.Abs(s) >= math.Abs(s0)-1e-12:
						extreme++
					}
					return
				}
				for _, u := range pool {
					if !permContains(used, u) {
						walk(append(append([]int(nil), used...), u))
					}
				}
			}
			walk(nil)
			if total != int(c.count) {
				t.Fatalf("oracle found %d assignments", total)
			}
			if want := float64(extreme) / float64(total); math.Abs(res.P-want) > 1e-12 {
				t.Fatalf("p %v, oracle %v", res.P, want)
			}
			// Monte Carlo with many draws lands near the exact value, and never
			// below 1/(draws + 1).
			mc, err := Randomization(context.Background(), stat, pool, c.obs, RandomizationOptions{Alternative: c.alt, MaxExact: 1, Draws: 4000, Seed: 2})
			if err != nil {
				t.Fatal(err)
			}
			if mc.Exact || math.Abs(mc.P-res.P) > 4*math.Sqrt(res.P*(1-res.P)/4000)+1.0/4001 || mc.P < 1.0/4001 {
				t.Fatalf("Monte Carlo p %v, exact %v", mc.P, res.P)
			}
		})
	}
}

// permKey names an assignment as its sorted (unit, start) pairs.
func permKey(a Assignment) string {
	pairs := make([][2]int, len(a.Units))
	for i := range a.Units {
		pairs[i] = [2]int{a.Units[i], a.Starts[i]}
	}
	for i := range pairs {
		for j := i + 1; j < len(pairs); j++ {
			if pairs[j][0] < pairs[i][0] {
				pairs[i], pairs[j] = pairs[j], pairs[i]
			}
		}
	}
	b := []byte{}
	for _, p := range pairs {
		b = append(b, byte(p[0]), byte(p[1]), ',')
	}
	return string(b)
}

func permContains(s []int, v int) bool {
	for _, x := range s {
		if x == v {
			return true
		}
	}
	return false
}

// TestRandomizationSizeUnderSharpNull draws outcomes with unit-level
// heteroskedasticity, assigns one or two units at random and checks that the
// exact test rejects at 5% no more often than 5% allows (it is exact under
// the sharp null; the discrete p-value can only make it conservative).
func TestRandomizationSizeUnderSharpNull(t *testing.T) {
	rng := rand.New(rand.NewPCG(8, 8))
	pool := make([]int, 25)
	for i := range pool {
		pool[i] = i
	}
	const reps = 400
	for _, k := range []int{1, 2} {
		t.Run([]string{"", "one treated", "two treated"}[k], func(t *testing.T) {
			rej := 0
			for range reps {
				y := make(map[int]float64, len(pool))
				for _, u := range pool {
					y[u] = rng.NormFloat64() * (1 + float64(u%5))
				}
				stat := func(a Assignment) (float64, error) {
					s := 0.0
					for _, u := range a.Units {
						s += y[u]
					}
					return s / float64(len(a.Units)), nil
				}
				perm := rng.Perm(len(pool))
				obs := Assignment{Units: perm[:k], Starts: make([]int, k)}
				res, err := Randomization(context.Background(), stat, pool, obs, RandomizationOptions{})
				if err != nil {
					t.Fatal(err)
				}
				if res.P <= 0.05 {
					rej++
				}
			}
			lo, hi := simtest.Wilson(rej, reps)
			t.Logf("%d treated: rejection %.3f (Wilson 95%% %.3f–%.3f)", k, float64(rej)/reps, lo, hi)
			if lo > 0.05 || hi < 0.01 {
				t.Fatalf("rejection rate %d/%d is not about 5%%", rej, reps)
			}
		})
	}
}

func TestRandomizationBadInput(t *testing.T) {
	stat := func(Assignment) (float64, error) { return 1, nil }
	pool := []int{1, 2, 3}
	cases := []struct {
		name string
		pool []int
		obs  Assignment
		stat func(Assignment) (float64, error)
	}{
		{"not in pool", pool, Assignment{Units: []int{9}, Starts: []int{1}}, stat},
		{"pool duplicate", []int{1, 1, 2}, Assignment{Units: []int{1}, Starts: []int{1}}, stat},
		{"treated duplicate", pool, Assignment{Units: []int{1, 1}, Starts: []int{1, 1}}, stat},
		{"starts mismatch", pool, Assignment{Units: []int{1}, Starts: []int{1, 2}}, stat},
		{"all treated", pool, Assignment{Units: []int{1, 2, 3}, Starts: []int{1, 1, 1}}, stat},
		{"no statistic", pool, Assignment{Units: []int{1}, Starts: []int{1}}, nil},
		{"NaN statistic", pool, Assignment{Units: []int{1}, Starts: []int{1}}, func(a Assignment) (float64, error) {
			if a.Units[0] == 3 {
				return math.NaN(), nil
			}
			return 1, nil
		}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if _, err := Randomization(context.Background(), c.stat, c.pool, c.obs, RandomizationOptions{}); !errors.Is(err, ErrRequest) {
				t.Fatalf("error %v, want ErrRequest", err)
			}
		})
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if _, err := Randomization(ctx, stat, pool, Assignment{Units: []int{1}, Starts: []int{1}}, RandomizationOptions{}); !errors.Is(err, context.Canceled) {
		t.Fatalf("cancelled: %v", err)
	}
}
