package audit_test

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"path/filepath"
	"slices"
	"sort"
	"strconv"
	"testing"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// simWorld is a simulated world ingested and classified in an in-memory store.
type simWorld struct {
	dir   string
	store *ingest.Store
	truth *sim.Truth
	eps   []audit.Episode
	units *audit.Units
}

// buildWorld generates a world with cfg, ingests and classifies it, detects its
// imports and reads its districts as units. Simulated data: invented, as the
// project's rules ask for estimator checks.
func buildWorld(tb testing.TB, cfg sim.Config) *simWorld {
	tb.Helper()
	ctx := context.Background()
	dir := tb.TempDir()
	truth, err := sim.Generate(ctx, cfg, dir, false)
	if err != nil {
		tb.Fatalf("generate: %v", err)
	}
	st, err := ingest.OpenInMemory(ingest.DefaultOptions())
	if err != nil {
		tb.Fatal(err)
	}
	tb.Cleanup(func() { st.Close() })
	paths := []string{filepath.Join(dir, "history.osh.gz"), filepath.Join(dir, "changesets.osm.gz")}
	if _, err := ingest.Ingest(ctx, st, paths, ingest.IngestOptions{}); err != nil {
		tb.Fatalf("ingest: %v", err)
	}
	r := rules.Default()
	if _, err := layers.Run(ctx, st, r, layers.Options{}); err != nil {
		tb.Fatalf("classify: %v", err)
	}
	eps, err := audit.DetectImports(ctx, st, r, audit.DetectOptions{})
	if err != nil {
		tb.Fatalf("detect: %v", err)
	}
	units, err := audit.ParseUnits(filepath.Join(dir, "districts.geojson"), audit.UnitOptions{})
	if err != nil {
		tb.Fatalf("units: %v", err)
	}
	return &simWorld{dir: dir, store: st, truth: truth, eps: eps, units: units}
}

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
	w := buildWorld(t, sim.DefaultConfig())

	// Detected episodes hold exactly the planted import changesets.
	var got []int64
	for _, e := range w.eps {
		for _, c := range e.Changesets {
			got = append(got, int64(c))
		}
	}
	sort.Slice(got, func(i, j int) bool { return got[i] < got[j] })
	want := append([]int64(nil), w.truth.ImportChangesets...)
	sort.Slice(want, func(i, j int) bool { return want[i] < want[j] })
	if !slices.Equal(got, want) {
		t.Fatalf("detected import changesets differ from truth.json: got %d, want %d", len(got), len(want))
	}
	if len(w.eps) != len(w.truth.ImportAccounts) {
		t.Fatalf("%d episodes, want one per import account (%d)", len(w.eps), len(w.truth.ImportAccounts))
	}

	for _, ep := range w.eps {
		t.Run(ep.ID, func(t *testing.T) {
			st, err := audit.BuildStudy(context.Background(), w.store, ep.Ref(), w.units, audit.StudyOptions{
				OtherImports: allChangesets(w.eps)})
			if err != nil {
				t.Fatal(err)
			}
			want := treatedByTruth(w.truth, int(ep.Accounts[0].UID))
			gotT := map[string]string{}
			for _, u := range st.Units {
				if u.Status == audit.StatusTreated || u.Status == audit.StatusDropped {
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
			// Matching improves balance on every covariate; Austin's (2009) rule of
			// thumb |SMD| < 0.1 holds after matching on the default world.
			for _, b := range st.Balance {
				if math.Abs(b.MatchedSMD) > math.Abs(b.SMD)+1e-9 {
					t.Errorf("%s: |SMD| after %.3f above before %.3f", b.Name, b.MatchedSMD, b.SMD)
				}
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

func allChangesets(eps []audit.Episode) []osm.ChangesetID {
	var out []osm.ChangesetID
	for _, e := range eps {
		out = append(out, e.Changesets...)
	}
	return out
}

func TestRunAuditJSONContract(t *testing.T) {
	w := buildWorld(t, sim.DefaultConfig())
	ep, err := audit.FindEpisode(w.eps, w.eps[0].ID)
	if err != nil {
		t.Fatal(err)
	}
	eo := audit.DefaultEstimateOptions()
	eo.Draws = 199
	rep, err := audit.RunAudit(context.Background(), w.store, ep, w.eps, w.units, audit.AuditOptions{Estimate: eo, UnitSpec: "districts.geojson"})
	if err != nil {
		t.Fatal(err)
	}
	var buf bytes.Buffer
	if err := rep.WriteJSON(&buf); err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := json.Unmarshal(buf.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"schema", "import", "units", "effects", "event_study", "balance", "warnings", "cautions"} {
		if _, ok := doc[k]; !ok {
			t.Errorf("audit JSON lacks %q", k)
		}
	}
	imp := doc["import"].(map[string]any)
	for _, k := range []string{"id", "accounts", "first_month", "last_month"} {
		if _, ok := imp[k]; !ok {
			t.Errorf("import lacks %q", k)
		}
	}
	effs := doc["effects"].([]any)
	if len(effs) == 0 {
		t.Fatal("no effects")
	}
	est := map[string]bool{}
	for _, e := range effs {
		m := e.(map[string]any)
		for _, k := range []string{"layer", "estimator", "att", "relative_effect", "ci95", "se", "p_value", "pre_trend_p", "treated_units", "control_units"} {
			if _, ok := m[k]; !ok {
				t.Errorf("effect lacks %q", k)
			}
		}
		est[m["estimator"].(string)] = true
	}
	for _, k := range []string{"cs-att", "ppml-twfe", "twfe-linear", "did-2x2"} {
		if !est[k] {
			t.Errorf("no %s effects", k)
		}
	}
	if _, err := audit.FindEpisode(w.eps, "imp-0"); err == nil {
		t.Error("unknown import id accepted")
	}
}
