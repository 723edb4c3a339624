package rollout

import (
	"fmt"
	"slices"
	"testing"

	"gonum.org/v1/gonum/stat/distuv"
)

// TestAssignReproducible: the same inputs and seed give the same waves, a
// different seed a different deal.
func TestAssignReproducible(t *testing.T) {
	act := []float64{5, 1, 9, 3, 3, 7, 0, 2, 8, 4, 6}
	a, err := Assign(act, nil, 3, 42)
	if err != nil {
		t.Fatal(err)
	}
	b, _ := Assign(act, nil, 3, 42)
	if !slices.Equal(a, b) {
		t.Errorf("same seed, different waves: %v and %v", a, b)
	}
	differ := false
	for s := uint64(1); s < 20 && !differ; s++ {
		c, _ := Assign(act, nil, 3, s)
		differ = !slices.Equal(a, c)
	}
	if !differ {
		t.Error("19 other seeds all gave the same waves")
	}
}

// TestAssignStratified: each stratum of like activity holds every wave once,
// so wave sizes differ by at most one per block and strata are balanced.
func TestAssignStratified(t *testing.T) {
	act := make([]float64, 12)
	for i := range act {
		act[i] = float64((i * 7) % 12)
	}
	blocks := []string{"n", "n", "n", "n", "n", "n", "s", "s", "s", "s", "s", "s"}
	for seed := range uint64(30) {
		w, err := Assign(act, blocks, 3, seed)
		if err != nil {
			t.Fatal(err)
		}
		for _, blk := range []string{"n", "s"} {
			var idx []int
			for i, b := range blocks {
				if b == blk {
					idx = append(idx, i)
				}
			}
			slices.SortFunc(idx, func(x, y int) int { return int(act[x] - act[y]) })
			for s := 0; s < len(idx); s += 3 {
				got := []int{w[idx[s]], w[idx[s+1]], w[idx[s+2]]}
				slices.Sort(got)
				if !slices.Equal(got, []int{0, 1, 2}) {
					t.Fatalf("seed %d block %s stratum %d: waves %v, want each wave once", seed, blk, s/3, got)
				}
			}
		}
	}
}

// TestAssignUniform checks that every unit lands in each wave with
// probability 1/waves: its wave counts over 3,000 seeds against the uniform
// distribution by Pearson's chi-square test (df = waves − 1), each at 0.1%,
// with a partial last stratum (11 units, 4 waves) and two blocks. Across
// the 11 units the number of rejections is also checked: a few false
// rejections at 0.1% are possible, all-unit failures are not.
func TestAssignUniform(t *testing.T) {
	const seeds, waves = 3000, 4
	act := []float64{5, 1, 9, 3, 3, 7, 0, 2, 8, 4, 6}
	blocks := []string{"a", "b", "a", "b", "a", "b", "a", "b", "a", "b", "a"}
	for _, tc := range []struct {
		name   string
		blocks []string
	}{{"one block", nil}, {"two blocks", blocks}} {
		t.Run(tc.name, func(t *testing.T) {
			counts := make([][]int, len(act))
			for u := range counts {
				counts[u] = make([]int, waves)
			}
			for s := range uint64(seeds) {
				w, err := Assign(act, tc.blocks, waves, s)
				if err != nil {
					t.Fatal(err)
				}
				for u, k := range w {
					counts[u][k]++
				}
			}
			crit := distuv.ChiSquared{K: waves - 1}.Quantile(0.999)
			for u, c := range counts {
				x2 := 0.0
				e := float64(seeds) / waves
				for _, o := range c {
					x2 += (float64(o) - e) * (float64(o) - e) / e
				}
				if x2 > crit {
					t.Errorf("unit %d: wave counts %v, chi-square %.2f above the 0.1%% critical value %.2f", u, c, x2, crit)
				}
			}
		})
	}
}

func TestAssignRefuse(t *testing.T) {
	for _, tc := range []struct {
		name   string
		act    []float64
		blocks []string
		waves  int
	}{
		{"one wave", []float64{1, 2, 3}, nil, 1},
		{"too few units", []float64{1, 2}, nil, 3},
		{"blocks of other length", []float64{1, 2, 3}, []string{"a"}, 2},
	} {
		t.Run(tc.name, func(t *testing.T) {
			if _, err := Assign(tc.act, tc.blocks, tc.waves, 1); err == nil {
				t.Error("no error")
			}
		})
	}
}

func ExampleAssign() {
	waves, _ := Assign([]float64{12, 3, 7, 0, 25, 9}, nil, 3, 2026)
	fmt.Println(waves)
	// Output: [0 1 2 0 1 2]
}
