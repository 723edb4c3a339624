package main

import (
	"encoding/csv"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// TestPanelTreatmentFile runs `loadwake panel --treatment` on a small
// invented world with a file listing one import account's districts and
// their months: the panel marks exactly those districts treated from those
// months and names the event, not an import. A file whose event switches off
// is refused with its name and line; --treatment with --import is a usage
// error.
func TestPanelTreatmentFile(t *testing.T) {
	store, world, truth := simulatedStore(t)
	units := filepath.Join(world, sim.DistrictsFile)
	dir := t.TempDir()
	file := filepath.Join(dir, "parties.csv")
	var b strings.Builder
	b.WriteString("unit,start\n")
	want := map[string]string{}
	for _, id := range truth.ImportAccounts[0].Districts {
		d := truth.Districts[id-1]
		fmt.Fprintf(&b, "%d,%s\n", id, d.Start)
		want[strconv.Itoa(id)] = d.Start
	}
	if err := os.WriteFile(file, []byte(b.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	csvPath := filepath.Join(dir, "panel.csv")
	out, err := execRootOut(t, "--store", store, "panel", "--units", units, "--csv", csvPath, "--all",
		"--treatment", file, "--event-name", "mapping party series")
	if err != nil {
		t.Fatalf("panel: %v\n%s", err, out)
	}
	if !strings.HasPrefix(out, "event mapping party series (") || strings.Contains(out, "features before import") {
		t.Errorf("output does not name the event:\n%s", out)
	}
	f, err := os.Open(csvPath)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatal(err)
	}
	got := map[string]string{}
	for _, r := range rows[1:] {
		if r[2] != "" {
			got[r[0]] = r[2]
		}
	}
	for id, m := range want {
		if got[id] != m {
			t.Errorf("district %s: first_treated %q, file %q", id, got[id], m)
		}
	}
	if len(got) != len(want) {
		t.Errorf("%d treated units in the panel, %d in the file: %v", len(got), len(want), got)
	}

	bad := filepath.Join(dir, "ended.csv")
	if err := os.WriteFile(bad, []byte("unit,start,end\n1,2031-03,\n2,2031-04,2031-09\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	_, err = execRootOut(t, "--store", store, "panel", "--units", units, "--treatment", bad)
	if err == nil || !strings.Contains(err.Error(), bad+":3:") || !strings.Contains(err.Error(), "switch off") {
		t.Errorf("an event that ends: %v, want a refusal naming %s:3", err, bad)
	}
	_, err = execRootOut(t, "--store", store, "panel", "--units", units, "--treatment", file, "--import", "imp-1")
	if !errors.As(err, new(cli.UsageError)) {
		t.Errorf("--treatment with --import: %v, want a usage error", err)
	}
}
