package main

import (
	"encoding/csv"
	"errors"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// TestPanelCommand runs `loadwake panel` on a small invented world as a user
// would and reads the CSV back: one row per unit and month, the documented
// leading columns, and the treated districts of truth.json carrying their
// import month.
func TestPanelCommand(t *testing.T) {
	store, world, truth := simulatedStore(t)
	units := filepath.Join(world, sim.DistrictsFile)
	csvPath := filepath.Join(t.TempDir(), "panel.csv")
	out, err := execRootOut(t, "--store", store, "panel", "--units", units, "--csv", csvPath, "--all",
		"--account", truth.ImportAccounts[0].User)
	if err != nil {
		t.Fatalf("panel: %v\n%s", err, out)
	}
	for _, want := range []string{"units: ", "COVARIATE", "SMD AFTER", "wrote " + csvPath} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
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
	if got := strings.Join(rows[0][:5], ","); got != "unit,month,first_treated,weight,cluster" {
		t.Fatalf("header %q", got)
	}
	starts := map[string]string{}
	for _, r := range rows[1:] {
		starts[r[0]] = r[2]
	}
	for _, id := range truth.ImportAccounts[0].Districts {
		d := truth.Districts[id-1]
		if got := starts[strconv.Itoa(id)]; got != d.Start {
			t.Errorf("district %d: first_treated %q, truth.json %q", id, got, d.Start)
		}
	}
	if (len(rows)-1)%len(starts) != 0 {
		t.Errorf("%d rows for %d units: not one per unit and month", len(rows)-1, len(starts))
	}

	_, err = execRootOut(t, "--store", store, "panel", "--csv", csvPath)
	if !errors.As(err, new(cli.UsageError)) {
		t.Errorf("panel without --units: %v, want a usage error", err)
	}
	_, err = execRootOut(t, "--store", store, "panel", "--units", units, "--import", "imp-0")
	if err == nil || !strings.Contains(err.Error(), "known imports") {
		t.Errorf("unknown import: %v, want the known ones listed", err)
	}
}
