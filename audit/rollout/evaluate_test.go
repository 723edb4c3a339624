package rollout

import (
	"bytes"
	"context"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/checklist"
)

// inventedPlan deals n invented units with random past activity to waves
// with Assign and the seed, as Make would.
func inventedPlan(tb testing.TB, n, waves int, seed uint64, rng *rand.Rand) *Plan {
	tb.Helper()
	pl := &Plan{Schema: Schema, Procedure: Procedure, Seed: seed, Waves: waves, Evaluation: "2025-07"}
	act := make([]float64, n)
	for i := range act {
		act[i] = math.Round(10*rng.ExpFloat64()) / 10
	}
	w, err := Assign(act, nil, waves, seed)
	if err != nil {
		tb.Fatal(err)
	}
	months := []string{"2025-01", "2025-04", "2025-07", "2025-10", "2026-01"}
	for i := range act {
		pl.Units = append(pl.Units, Unit{ID: "u" + string(rune('A'+i%26)) + string(rune('a'+i/26)), Wave: w[i] + 1, Start: months[w[i]], Activity: act[i]})
	}
	return pl
}

func TestReadPlan(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 1))
	pl := inventedPlan(t, 9, 3, 5, rng)
	dir := t.TempDir()
	good := filepath.Join(dir, "plan.json")
	var b bytes.Buffer
	if err := pl.WriteJSON(&b); err != nil {
		t.Fatal(err)
	}
	os.WriteFile(good, b.Bytes(), 0o644)
	back, err := ReadPlan(good)
	if err != nil {
		t.Fatal(err)
	}
	w, err := back.Redraw(back.Seed)
	if err != nil {
		t.Fatal(err)
	}
	for i, u := range back.Units {
		if w[i] != u.Wave {
			t.Errorf("unit %s: redrawn with the plan's seed into wave %d, planned %d", u.ID, w[i], u.Wave)
		}
	}
	for _, tc := range []struct {
		name, text, want string
	}{
		{"not json", `{"schema": `, "byte"},
		{"other schema", `{"schema": "other/1"}`, "schema"},
		{"bad month", strings.Replace(b.String(), `"start": "2025-01"`, `"start": "2025-1x"`, 1), "start month"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			path := filepath.Join(dir, "bad.json")
			os.WriteFile(path, []byte(tc.text), 0o644)
			_, err := ReadPlan(path)
			if err == nil || !strings.Contains(err.Error(), path) || !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %v, want one naming %s and %q", err, path, tc.want)
			}
		})
	}
}

// TestRandomizationPSize: on null worlds (outcomes unrelated to the
// assignment; heavy-tailed, unequal across units) the randomization
// p-value re-drawing the plan's assignment rejects at 5% in at most 5% of
// worlds (up to Monte Carlo error: the Wilson interval of the rate must
// reach 5%), and on worlds where the treated waves' outcomes grow fourfold it
// rejects in most. Figures of a run are in the log.
func TestRandomizationPSize(t *testing.T) {
	const worlds, draws = 400, 99
	ctx := context.Background()
	for _, tc := range []struct {
		name   string
		units  int
		effect float64
	}{{"null, 12 units", 12, 1}, {"null, 30 units", 30, 1}, {"fourfold, 30 units", 30, 4}} {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(7, uint64(tc.units)))
			rej := 0
			for w := range worlds {
				pl := inventedPlan(t, tc.units, 3, uint64(100+w), rng)
				y := make([]float64, tc.units)
				for i, u := range pl.Units {
					y[i] = math.Exp(rng.NormFloat64()) * (1 + u.Activity)
					if u.Wave < pl.Waves {
						y[i] *= tc.effect
					}
				}
				stat := func(waves []int) (float64, error) {
					var st, sc, nt, nc float64
					for i, k := range waves {
						if k < pl.Waves {
							st, nt = st+math.Log(y[i]), nt+1
						} else {
							sc, nc = sc+math.Log(y[i]), nc+1
						}
					}
					return st/nt - sc/nc, nil
				}
				p, _, err := pl.RandomizationP(ctx, stat, draws)
				if err != nil {
					t.Fatal(err)
				}
				if p <= 0.05 {
					rej++
				}
			}
			ci, _ := checklist.Wilson(rej, worlds, 0.95)
			t.Logf("rejections at 5%%: %d of %d = %.1f%% [%.1f%%, %.1f%%]", rej, worlds, 100*ci.Estimate, 100*ci.Lower, 100*ci.Upper)
			if tc.effect == 1 && ci.Lower > 0.05 {
				t.Errorf("size %.1f%% [%.1f%%, %.1f%%] above 5%%", 100*ci.Estimate, 100*ci.Lower, 100*ci.Upper)
			}
			if tc.effect != 1 && ci.Estimate < 0.8 {
				t.Errorf("a fourfold rise detected in %.1f%% of worlds, want most", 100*ci.Estimate)
			}
		})
	}
}

func TestDeviations(t *testing.T) {
	pl := &Plan{Waves: 3, Evaluation: "2025-07", Units: []Unit{
		{ID: "a", Wave: 1, Start: "2025-01"}, {ID: "b", Wave: 1, Start: "2025-01"}, {ID: "c", Wave: 2, Start: "2025-04"},
		{ID: "d", Wave: 2, Start: "2025-04"}, {ID: "e", Wave: 3, Start: "2025-07"}, {ID: "f", Wave: 3, Start: "2025-07"},
	}}
	got := pl.Deviations(map[string]string{"a": "2025-01", "b": "2025-03", "c": "2025-02", "e": "2025-05", "f": "2025-08", "z": "2025-02"})
	want := map[string]string{"b": "late", "c": "early", "d": "not loaded", "e": "comparison loaded", "z": "not in the plan"}
	if len(got) != len(want) {
		t.Fatalf("deviations %+v, want %v", got, want)
	}
	for _, d := range got {
		if want[d.Unit] != d.Kind {
			t.Errorf("unit %s: %q, want %q", d.Unit, d.Kind, want[d.Unit])
		}
	}
}
