package audit_test

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/layers"
)

// TestAuditAll checks that each overview row carries what audit.Run and the
// checklist give for that import alone (the estimators themselves are
// checked against outside sources in their packages), and that the
// simulator's planted effects show in the first import's row.
func TestAuditAll(t *testing.T) {
	w := worldtest.Shared(t, sim.DefaultConfig())
	ctx := context.Background()
	eo := did.DefaultOptions()
	eo.Draws = 99 // the fewest the estimators take: this test compares, it does not judge intervals
	opts := audit.OverviewOptions{Audit: audit.Options{Estimate: eo, UnitSpec: "districts.geojson"}}
	var seen []string
	opts.Progress = func(i, n int, id string) {
		if n != len(w.Episodes) || i != len(seen) {
			t.Errorf("progress %d of %d for %s", i, n, id)
		}
		seen = append(seen, id)
	}
	ov, err := audit.AuditAll(ctx, w.Store, w.Rules, w.Episodes, w.Units, opts)
	if err != nil {
		t.Fatal(err)
	}
	if len(ov.Imports) != len(w.Episodes) || len(seen) != len(w.Episodes) {
		t.Fatalf("%d rows, %d progress calls for %d episodes", len(ov.Imports), len(seen), len(w.Episodes))
	}
	row := ov.Imports[0]
	ep := &w.Episodes[0]
	rep, err := audit.Run(ctx, w.Store, ep, w.Episodes[1:], w.Units, opts.Audit)
	if err != nil {
		t.Fatal(err)
	}
	t.Run("row equals the import's own audit", func(t *testing.T) {
		if row.Import != ep.ID || row.Created != ep.Created || row.Changesets != len(ep.Changesets) || row.Error != "" {
			t.Fatalf("row %+v for episode %s", row, ep.ID)
		}
		if len(row.ImportAreas) != rep.Units.Treated || row.ComparisonAreas != rep.Units.Controls || row.Window != rep.Window {
			t.Errorf("areas %d/%d window %v, audit %d/%d %v", len(row.ImportAreas), row.ComparisonAreas, row.Window, rep.Units.Treated, rep.Units.Controls, rep.Window)
		}
		if len(row.Warnings) != len(rep.Warnings) {
			t.Errorf("%d warnings, audit %d", len(row.Warnings), len(rep.Warnings))
		}
		for _, l := range layers.Layers {
			want, ok := rep.Headline(l.String())
			got, gok := row.Effect(l.String())
			if ok != gok {
				t.Fatalf("%s: effect present %v, audit %v", l, gok, ok)
			}
			if ok && (got.CI95 != want.CI95 || *got.RelativeEffect != *want.RelativeEffect) {
				t.Errorf("%s: %+v, audit %+v", l, got, want)
			}
		}
	})
	t.Run("planted effects", func(t *testing.T) {
		// sim.DefaultConfig plants attribute ×0.7 and new_feature ×1.2.
		for _, c := range []struct {
			layer string
			sign  float64
		}{{"attribute", -1}, {"new_feature", 1}} {
			e, ok := row.Effect(c.layer)
			if !ok || e.RelativeEffect == nil || c.sign**e.RelativeEffect <= 0 {
				t.Errorf("%s: %+v, want sign %+v", c.layer, e, c.sign)
			}
		}
		if len(row.TopKeys) == 0 || len(row.TopKeys) > audit.DefaultTopKeys {
			t.Errorf("top keys %+v", row.TopKeys)
		}
	})
	t.Run("json", func(t *testing.T) {
		var buf bytes.Buffer
		if err := ov.WriteJSON(&buf); err != nil {
			t.Fatal(err)
		}
		var doc struct {
			Schema  string           `json:"schema"`
			Imports []map[string]any `json:"imports"`
		}
		if err := json.Unmarshal(buf.Bytes(), &doc); err != nil {
			t.Fatal(err)
		}
		if doc.Schema != audit.OverviewSchema || len(doc.Imports) != len(ov.Imports) {
			t.Errorf("schema %q, %d imports", doc.Schema, len(doc.Imports))
		}
		for _, k := range []string{"import", "import_areas", "effects", "top_keys", "warnings", "window"} {
			if _, ok := doc.Imports[0][k]; !ok {
				t.Errorf("row lacks %q", k)
			}
		}
	})
	t.Run("cancelled", func(t *testing.T) {
		cctx, cancel := context.WithCancel(ctx)
		cancel()
		if _, err := audit.AuditAll(cctx, w.Store, w.Rules, w.Episodes, w.Units, opts); !errors.Is(err, context.Canceled) {
			t.Errorf("err %v, want context.Canceled", err)
		}
	})
}
