package study_test

import (
	"context"
	"math"
	"slices"
	"sort"
	"strconv"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/internal/simtest"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
	"github.com/paulmach/osm"
)

// treatedByTruth maps the district ids of one import account to their start month.
func treatedByTruth(t *sim.Truth, uid int) map[string]string {
	out := map[string]string{}
	for _, a := range t.ImportAccounts {
		if a.UID != uid {
			continue
		}
		for _, d := range a.Districts {
			out[strconv.Itoa(d)] = t.Districts[d-1].Start
		}
	}
	return out
}

func TestStudyOnSimulatedWorld(t *testing.T) {
	// make test: the default world at half its activity (the same districts,
	// imports and planted effects at half the build cost); make validate: the
	// default world.
	cfg := sim.DefaultConfig()
	if !simtest.Validate {
		cfg.Scale = 0.5
	}
	w := worldtest.Build(t, cfg)

	// Detected episodes hold exactly the planted import changesets.
	var got []int64
	for _, e := range w.Episodes {
		for _, c := range e.Changesets {
			got = append(got, int64(c))
		}
	}
	sort.Slice(got, func(i, j int) bool { return got[i] < got[j] })
	want := append([]int64(nil), w.Truth.ImportChangesets...)
	sort.Slice(want, func(i, j int) bool { return want[i] < want[j] })
	if !slices.Equal(got, want) {
		t.Fatalf("detected import changesets differ from truth.json: got %d, want %d", len(got), len(want))
	}
	if len(w.Episodes) != len(w.Truth.ImportAccounts) {
		t.Fatalf("%d episodes, want one per import account (%d)", len(w.Episodes), len(w.Truth.ImportAccounts))
	}

	for _, ep := range w.Episodes {
		t.Run(ep.ID, func(t *testing.T) {
			st, err := study.Build(context.Background(), w.Store, study.RefOf(&ep), w.Units, study.Options{
				OtherImports: allChangesets(w.Episodes)})
			if err != nil {
				t.Fatal(err)
			}
			want := treatedByTruth(w.Truth, int(ep.Accounts[0].UID))
			gotT := map[string]string{}
			for _, u := range st.Units {
				if u.Name == "" {
					t.Errorf("unit %s has no name; districts.geojson names every district", u.ID)
				}
				if u.Status == study.StatusTreated || u.Status == study.StatusDropped {
					gotT[u.ID] = u.FirstMonth
				}
			}
			if len(gotT) != len(want) {
				t.Errorf("treated units %v, want truth.json's %v", gotT, want)
			}
			for id, m := range want {
				if gotT[id] != m {
					t.Errorf("district %s: start %q, want %q (truth.json)", id, gotT[id], m)
				}
			}
			// Matching improves balance on every covariate of levels (Austin's
			// 2009 standardized mean differences). Growth rows are not matched
			// on and may move either way; each layer has one.
			growth := 0
			for _, b := range st.Balance {
				if strings.HasPrefix(b.Name, study.GrowthPrefix) {
					growth++
					continue
				}
				if math.Abs(b.MatchedSMD) > math.Abs(b.SMD)+1e-9 {
					t.Errorf("%s: |SMD| after %.3f above before %.3f", b.Name, b.MatchedSMD, b.SMD)
				}
			}
			if growth != 4 {
				t.Errorf("%d growth rows in the balance table, want one per layer", growth)
			}
			// The panel: every layer present, treated units carry their start month.
			if st.Panel.Months < 24 {
				t.Errorf("panel of %d months", st.Panel.Months)
			}
			for _, l := range layers.Layers {
				if !slices.Contains(st.Panel.Outcomes, l.String()) {
					t.Errorf("outcome %s missing", l)
				}
			}
		})
	}
}

func allChangesets(eps []episode.Episode) []osm.ChangesetID {
	var out []osm.ChangesetID
	for _, e := range eps {
		out = append(out, e.Changesets...)
	}
	return out
}
