package main

import (
	"bytes"
	"encoding/json"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/report"
	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// TestDemoAndReport runs the demo on a small invented world, checks the files
// and the summary, then runs `report` and `audit --report --md` on the store
// the demo left.
func TestDemoAndReport(t *testing.T) {
	if testing.Short() {
		t.Skip("simulates, ingests and audits a world")
	}
	dir := filepath.Join(t.TempDir(), "demo")
	out, err := execRootOut(t, "demo", "--out", dir, "--grid", strconv.Itoa(demoGrid), "--scale", "0.5", "--draws", "99", "--seed", "2")
	if err != nil {
		t.Fatalf("demo: %v\n%s", err, out)
	}
	lines := strings.Split(strings.TrimSpace(out), "\n")
	if len(lines) != 6 {
		t.Fatalf("demo printed %d lines, want five summary lines and a footer:\n%s", len(lines), out)
	}
	for i, prefix := range []string{"import:", "units:", "effects:", "neglected:", "report:"} {
		if !strings.HasPrefix(lines[i], prefix) {
			t.Errorf("line %d = %q, want it to start with %q", i+1, lines[i], prefix)
		}
	}
	if !strings.Contains(lines[1], fmt.Sprintf("%d districts", demoGrid*demoGrid)) || !strings.Contains(out, "invented data") {
		t.Errorf("summary does not describe the %d×%d invented world:\n%s", demoGrid, demoGrid, out)
	}
	rdir := filepath.Join(dir, "report")
	for _, name := range []string{report.FileMarkdown, report.FileHTML, report.FileJSON, report.FileUnits, report.FilePanel, report.FileChecklist, report.FileAssessment} {
		if fi, err := os.Stat(filepath.Join(rdir, name)); err != nil || fi.Size() == 0 {
			t.Errorf("demo report %s: %v", name, err)
		}
	}
	page, err := os.ReadFile(filepath.Join(rdir, report.FileHTML))
	if err != nil {
		t.Fatal(err)
	}
	if n := strings.Count(string(page), "<svg "); n != 7 {
		t.Errorf("report.html holds %d charts, want 7 (four event studies, balance, newcomer retention, map)", n)
	}
	if !strings.Contains(string(page), `<section id="retention">`) {
		t.Error("report.html lacks the newcomer retention section")
	}
	if !strings.Contains(string(page), "Proposed import") {
		t.Error("report.html lacks the assessment of the invented proposal")
	}
	var units struct {
		Features []json.RawMessage `json:"features"`
	}
	b, _ := os.ReadFile(filepath.Join(rdir, report.FileUnits))
	if err := json.Unmarshal(b, &units); err != nil || len(units.Features) != demoGrid*demoGrid {
		t.Errorf("units.geojson: %d features, err %v; want %d", len(units.Features), err, demoGrid*demoGrid)
	}
	if _, err := execRootOut(t, "demo", "--out", dir); err == nil {
		t.Error("a second demo into a full folder without --force should fail")
	}

	var rep struct {
		Import struct {
			ID string `json:"id"`
		} `json:"import"`
	}
	b, _ = os.ReadFile(filepath.Join(rdir, report.FileJSON))
	if err := json.Unmarshal(b, &rep); err != nil || rep.Import.ID == "" {
		t.Fatalf("report.json: %v", err)
	}
	store := filepath.Join(dir, "loadwake.db")
	districts := filepath.Join(dir, "world", sim.DistrictsFile)
	out2 := filepath.Join(t.TempDir(), "review")
	if out, err := execRootOut(t, "--store", store, "report", "--units", districts, "--import", rep.Import.ID, "--out", out2, "--draws", "99"); err != nil {
		t.Fatalf("report: %v\n%s", err, out)
	}
	for _, name := range []string{report.FileMarkdown, report.FileHTML, report.FileJSON, report.FileUnits, report.FilePanel, report.FileChecklist} {
		if _, err := os.Stat(filepath.Join(out2, name)); err != nil {
			t.Errorf("report command: %v", err)
		}
	}
	md := filepath.Join(t.TempDir(), "audit.md")
	out3 := filepath.Join(t.TempDir(), "audit-report")
	if out, err := execRootOut(t, "--store", store, "audit", "--units", districts, "--import", rep.Import.ID, "--draws", "99", "--md", md, "--out", out3); err != nil {
		t.Fatalf("audit --md --report: %v\n%s", err, out)
	}
	if b, err := os.ReadFile(md); err != nil || !bytes.HasPrefix(b, []byte("# Follow-on editing after import ")) {
		t.Errorf("audit --md: %v", err)
	}
	if _, err := os.Stat(filepath.Join(out3, report.FileHTML)); err != nil {
		t.Errorf("audit --report: %v", err)
	}
	out4 := filepath.Join(t.TempDir(), "checklist-report")
	if out, err := execRootOut(t, "--store", store, "checklist", "--units", districts, "--import", rep.Import.ID, "--out", out4); err != nil {
		t.Fatalf("checklist --report: %v\n%s", err, out)
	}
	if b, err := os.ReadFile(filepath.Join(out4, report.FileMarkdown)); err != nil || !bytes.Contains(b, []byte("Neglected tags")) {
		t.Errorf("checklist --report: %v", err)
	}
	out5 := filepath.Join(t.TempDir(), "assess-report")
	if out, err := execRootOut(t, "--store", store, "assess", filepath.Join(dir, "proposal.geojson"), "--units", districts, "--draws", "99", "--out", out5); err != nil {
		t.Fatalf("assess --report: %v\n%s", err, out)
	}
	if b, err := os.ReadFile(filepath.Join(out5, report.FileHTML)); err != nil || !bytes.Contains(b, []byte("Proposed import")) {
		t.Errorf("assess --report: %v", err)
	}
}

func TestReportUsage(t *testing.T) {
	cases := []struct {
		name string
		args []string
	}{
		{"no out", []string{"report", "--units", "tiles:12"}},
		{"no units", []string{"report", "--out", "x"}},
		{"few draws", []string{"report", "--units", "tiles:12", "--out", "x", "--draws", "5"}},
		{"demo bad grid", []string{"demo", "--out", "x", "--grid", "2"}},
		{"demo bad draws", []string{"demo", "--out", "x", "--draws", "1"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			_, err := execRootOut(t, c.args...)
			if _, ok := err.(cli.UsageError); !ok {
				t.Errorf("%v: err = %v, want a usage error", c.args, err)
			}
		})
	}
}
