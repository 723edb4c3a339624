package report

import (
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit"
	"github.com/loadwake/loadwake/audit/did"
	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/audit/markdown"
	"github.com/loadwake/loadwake/audit/proposal"
	"github.com/loadwake/loadwake/audit/sim"
)

// TestOneStory writes the report of a small demo-like world (invented data
// from audit/sim, with a planted drop in attribute edits), reads back
// report.json, report.md, the chart files and assessment.json, and checks
// that the summary, the event-study charts, the per-area figures and the
// assessment's "what followed" all come from the headline estimator and
// agree with each other.
func TestOneStory(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates, ingests and audits a world")
	}
	cfg := sim.DefaultConfig()
	cfg.Seed = 3
	cfg.Cols, cfg.Rows, cfg.Months = 6, 5, 30
	cfg.Treated, cfg.Waves = 10, 2
	cfg.ImportAccounts = 1
	cfg.Scale = 0.5
	w := worldtest.Build(t, cfg)
	eo := did.DefaultOptions()
	eo.Draws = 199
	eo.Window = did.Window{Pre: 6, Post: 12}
	ctx := context.Background()
	rep, err := audit.Run(ctx, w.Store, &w.Episodes[0], w.Episodes, w.Units, audit.Options{Estimate: eo})
	if err != nil {
		t.Fatal(err)
	}
	a := &proposal.Assessment{Proposal: "invented proposal", Nearest: []proposal.ImportMatch{{Episode: w.Episodes[0]}}}
	a.AddPastAudits(map[string][]did.Effect{w.Episodes[0].ID: rep.Effects}, nil)
	dir := t.TempDir()
	if err := Write(dir, Input{Audit: rep, Units: w.Units, Assessment: a}); err != nil {
		t.Fatal(err)
	}
	read := func(name string) []byte {
		t.Helper()
		b, err := os.ReadFile(filepath.Join(dir, name))
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	var js struct {
		Effects    []did.Effect        `json:"effects"`
		EventStudy []did.EventStudyRow `json:"event_study"`
		Robustness []audit.Agreement   `json:"robustness"`
		Figures    []audit.UnitFigure  `json:"unit_figures"`
	}
	if err := json.Unmarshal(read(FileJSON), &js); err != nil {
		t.Fatal(err)
	}
	var as struct {
		Expected []proposal.LayerRange `json:"expected_effects"`
	}
	if err := json.Unmarshal(read(FileAssessment), &as); err != nil {
		t.Fatal(err)
	}
	md := string(read(FileMarkdown))
	head := map[string]did.Effect{}
	for _, e := range js.Effects {
		if e.Estimator == did.Headline {
			head[e.Layer] = e
		}
	}
	for _, layer := range []string{"geometry", "attribute", "new_feature"} {
		t.Run(layer, func(t *testing.T) {
			h, ok := head[layer]
			if !ok || h.RelativeEffect == nil {
				t.Fatalf("no headline for %s in report.json", layer)
			}
			// Summary: the Markdown's headline row shows the JSON's headline.
			eff, iv := effectText(h)
			if row := "| " + markdown.Escape(layer) + " | " + markdown.Escape(eff) + " | " + markdown.Escape(iv) + " |"; !strings.Contains(md, row) {
				t.Errorf("report.md lacks the headline row %q", row)
			}
			// Charts: drawn from the headline's own event study, on its scale.
			svg := string(read(filepath.Join(DirCharts, "event-study-"+layer+".svg")))
			if !strings.Contains(svg, "("+did.Headline+")") {
				t.Errorf("event-study chart of %s is not the headline's", layer)
			}
			post, n := 0.0, 0
			for _, r := range js.EventStudy {
				if r.Layer == layer && r.Estimator == did.Headline {
					if r.Scale != did.ScaleRelative {
						t.Errorf("headline event-study row on scale %q", r.Scale)
					}
					if r.EventTime >= 0 {
						post += r.Estimate
						n++
					}
				}
			}
			// The chart's post-import months average to the headline's
			// direction when the headline is clear (p < 0.05).
			if n == 0 {
				t.Fatal("no post-import event-study rows")
			}
			if h.PValue < 0.05 && (post/float64(n) < 0) != (*h.RelativeEffect < 0) {
				t.Errorf("chart's post-import mean %+.3f, headline %+.3f (p = %.3g): they disagree", post/float64(n), *h.RelativeEffect, h.PValue)
			}
			// Assessment: what followed is the headline's interval.
			found := false
			for _, r := range as.Expected {
				if r.Layer == layer {
					found = true
					if r.Estimator != did.Headline || r.Low != h.CI95[0] || r.High != h.CI95[1] {
						t.Errorf("assessment range %+v; want the headline %s %v", r, did.Headline, h.CI95)
					}
				}
			}
			if !found && !h.NoInterval {
				t.Errorf("assessment has no range for %s", layer)
			}
			// Robustness: every check compared with this same headline.
			for _, r := range js.Robustness {
				if r.Layer == layer && r.Headline != *h.RelativeEffect {
					t.Errorf("robustness row %+v compares with %v, not the headline %v", r, r.Headline, *h.RelativeEffect)
				}
			}
		})
	}
	// Per-area figures are per area, not one pooled number repeated.
	seen := map[float64]bool{}
	for _, f := range js.Figures {
		if f.Layer == "attribute" {
			seen[f.Observed-f.Expected] = true
		}
	}
	if len(seen) < 2 {
		t.Errorf("%d distinct attribute figures over the import areas; want one per area", len(seen))
	}
	if !strings.Contains(md, "## Robustness checks") {
		t.Error("report.md has no robustness section")
	}
}
