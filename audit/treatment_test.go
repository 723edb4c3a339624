package audit_test

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"math"
	"reflect"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/internal/simtest"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/audit/study"
)

// treatmentCSV writes the treated districts of an import's audit and their
// first months as a treatment file, as a user would copy them from the
// report's unit list.
func treatmentCSV(tb testing.TB, rep *audit.Report, event string) []byte {
	tb.Helper()
	var b bytes.Buffer
	b.WriteString("# the districts an import reached, copied from its audit\nunit,start,event\n")
	n := 0
	for _, u := range rep.UnitList {
		if u.Status == study.StatusTreated || u.Status == study.StatusDropped {
			fmt.Fprintf(&b, "%s,%s,%s\n", u.ID, u.FirstMonth, event)
			n++
		}
	}
	if n == 0 {
		tb.Fatal("the import audit has no treated unit")
	}
	return b.Bytes()
}

// TestTreatmentFileReproducesImportAudit is the check of --treatment: on a
// simulated world (invented data), the audit of a treatment file listing the
// districts an import reached and the months it reached them gives exactly the
// import audit's estimates (every estimator, interval, p-value and
// event-study point), its unit roles and its balance, while the report names
// the event from the file and never calls it an import.
func TestTreatmentFileReproducesImportAudit(t *testing.T) {
	w := worldtest.Shared(t, sim.DefaultConfig())
	ctx := context.Background()
	ep, err := episode.Find(w.Episodes, w.Episodes[0].ID)
	if err != nil {
		t.Fatal(err)
	}
	eo := did.DefaultOptions()
	eo.Draws = 99
	opts := audit.Options{Estimate: eo, UnitSpec: "districts.geojson"}
	imp, err := audit.Run(ctx, w.Store, ep, w.Episodes, w.Units, opts)
	if err != nil {
		t.Fatal(err)
	}
	a, err := study.ReadAssignment(bytes.NewReader(treatmentCSV(t, imp, "building survey")), "reached.csv", study.ReadOptions{})
	if err != nil {
		t.Fatal(err)
	}
	got, err := audit.RunTreatment(ctx, w.Store, a, w.Episodes, w.Units, opts)
	if err != nil {
		t.Fatal(err)
	}
	if got.Event.Kind != audit.EventFile || got.Event.Name != "building survey" || got.EventName() != "building survey" || got.IsImport() {
		t.Errorf("event %+v", got.Event)
	}
	if imp.Event.Kind != audit.EventImport || imp.EventName() != "import "+ep.ID {
		t.Errorf("import's event %+v", imp.Event)
	}
	if got.Window != imp.Window {
		t.Fatalf("window %v, import audit's %v", got.Window, imp.Window)
	}
	for i, u := range imp.UnitList {
		g := got.UnitList[i]
		if g.ID != u.ID || g.Status != u.Status || g.Weight != u.Weight || g.FirstMonth != u.FirstMonth && u.Status == study.StatusTreated {
			t.Errorf("unit %s: %s weight %g from %s; import audit: %s weight %g from %s", u.ID, g.Status, g.Weight, g.FirstMonth, u.Status, u.Weight, u.FirstMonth)
		}
	}
	for i, b := range imp.Balance {
		g := got.Balance[i]
		g.Covariate = b.Covariate // "before the event" instead of "before import"
		if g != b {
			t.Errorf("balance row %d: %+v\nimport audit: %+v", i, got.Balance[i], b)
		}
	}
	if len(got.Effects) != len(imp.Effects) {
		t.Fatalf("%d effects, import audit %d", len(got.Effects), len(imp.Effects))
	}
	// The headline (and its event study) must agree to the last bit; the
	// robustness checks to 1e-9 relative (cs-att's doubly robust step sums
	// in an order that can move the last digit between two runs).
	heads := 0
	for i, e := range imp.Effects {
		g := got.Effects[i]
		if e.Estimator == did.Headline {
			heads++
			if !reflect.DeepEqual(g, e) {
				t.Errorf("%s %s: %+v\nimport audit: %+v", e.Layer, e.Estimator, g, e)
			}
			continue
		}
		if g.Layer != e.Layer || g.Estimator != e.Estimator || !close9(g.ATT, e.ATT) || !close9(g.CI95[0], e.CI95[0]) ||
			!close9(g.CI95[1], e.CI95[1]) || !close9(g.PValue, e.PValue) || g.Method != e.Method {
			t.Errorf("%s %s: %+v\nimport audit: %+v", e.Layer, e.Estimator, g, e)
		}
	}
	if heads < 4 {
		t.Errorf("%d headline effects compared", heads)
	}
	if !reflect.DeepEqual(got.EventStudy, imp.EventStudy) || !reflect.DeepEqual(got.Warnings, imp.Warnings) {
		t.Errorf("event study or warnings differ: %v vs %v", got.Warnings, imp.Warnings)
	}
	if simtest.Validate { // the split refits the model per group and per re-deal: long
		checkSplits(t, got)
	}
	h, _ := got.Headline("attribute")
	hi, _ := imp.Headline("attribute")
	t.Logf("attribute, %s: file %+.6f [%+.6f, %+.6f], import %+.6f [%+.6f, %+.6f]", did.Headline,
		*h.RelativeEffect, h.CI95[0], h.CI95[1], *hi.RelativeEffect, hi.CI95[0], hi.CI95[1])
}

func close9(a, b float64) bool { return math.Abs(a-b) <= 1e-9*max(1, math.Abs(a), math.Abs(b)) }

// checkSplits splits an event's audit by an invented property that deals
// the treated districts alternately to two groups of 4: 4 splits (one
// trait × 4 layers), each with the interaction test.
// The splits of the tested layers are one Holm family.
func checkSplits(t testing.TB, got *audit.Report) {
	t.Helper()
	ctx := context.Background()
	prop, n := map[string]string{}, 0
	for _, u := range got.UnitList {
		if u.Status == study.StatusTreated {
			prop[u.ID] = []string{"north", "south"}[n%2]
			n++
		}
	}
	if err := audit.AddSplits(ctx, got, []audit.SplitSpec{{Trait: "side", Property: prop}}, did.Options{}); err != nil {
		t.Fatal(err)
	}
	if got.Splits.Declared != 4 || got.Splits.Tested != 4 || len(audit.SplitLines(got)) != 4 {
		t.Errorf("splits: %d declared, %d tested", got.Splits.Declared, got.Splits.Tested)
	}
	for _, l := range audit.SplitLines(got) {
		t.Log(l)
	}
	if err := audit.AddSplits(ctx, got, []audit.SplitSpec{{Trait: "colour"}}, did.Options{}); !errors.Is(err, audit.ErrSplit) {
		t.Errorf("unknown trait: %v", err)
	}
}
