package audit_test

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
)

func TestRunAuditJSONContract(t *testing.T) {
	w := worldtest.Shared(t, sim.DefaultConfig())
	ep, err := episode.Find(w.Episodes, w.Episodes[0].ID)
	if err != nil {
		t.Fatal(err)
	}
	eo := did.DefaultOptions()
	eo.Draws = 199
	rep, err := audit.Run(context.Background(), w.Store, ep, w.Episodes, w.Units, audit.Options{Estimate: eo, UnitSpec: "districts.geojson"})
	if err != nil {
		t.Fatal(err)
	}
	// Provenance: every changeset of the episode linked to its page, the
	// simulator's source and documentation tags found, the ODbL line.
	p := rep.Provenance
	if p == nil || len(p.Changesets) != len(ep.Changesets) || p.Attribution != audit.Attribution {
		t.Fatalf("provenance %+v", p)
	}
	if p.Changesets[0].URL != fmt.Sprintf("https://www.openstreetmap.org/changeset/%d", ep.Changesets[0]) {
		t.Errorf("changeset link %s", p.Changesets[0].URL)
	}
	if len(p.SourceTags) == 0 || len(p.Documentation) == 0 || !strings.HasPrefix(p.Documentation[0], "https://wiki.quorvesk.example/") {
		t.Errorf("source tags %v, documentation %v", p.SourceTags, p.Documentation)
	}
	var buf bytes.Buffer
	if err := rep.WriteJSON(&buf); err != nil {
		t.Fatal(err)
	}
	var doc map[string]any
	if err := json.Unmarshal(buf.Bytes(), &doc); err != nil {
		t.Fatal(err)
	}
	for _, k := range []string{"schema", "import", "units", "effects", "event_study", "balance", "warnings", "cautions", "provenance"} {
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
	if _, err := episode.Find(w.Episodes, "imp-0"); err == nil {
		t.Error("unknown import id accepted")
	}
}
