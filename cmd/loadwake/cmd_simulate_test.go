package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

func TestSimulateCommand(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "world")
	out, err := execRootOut(t, "simulate", "--out", dir, "--seed", "3", "--cols", "4", "--rows", "3", "--months", "10",
		"--treated", "4", "--cohorts", "2", "--effect-attribute", "0.6", "--dynamic", "--ramp", "4", "--diverging-pretrend")
	if err != nil {
		t.Fatalf("simulate: %v", err)
	}
	b, err := os.ReadFile(filepath.Join(dir, sim.TruthFile))
	if err != nil {
		t.Fatal(err)
	}
	var tr sim.Truth
	if err := json.Unmarshal(b, &tr); err != nil {
		t.Fatalf("truth.json: %v", err)
	}
	c := tr.Config
	if c.Seed != 3 || c.Cols != 4 || c.Rows != 3 || c.Months != 10 || c.Treated != 4 || c.Waves != 2 ||
		c.Effects.Attribute != 0.6 || !c.Dynamic || c.RampMonths != 4 || !c.TrendSelection {
		t.Errorf("flags did not reach the configuration: %+v", c)
	}
	for _, want := range []string{
		"4×3 districts",
		fmt.Sprintf("%d nodes, %d ways", tr.Tallies.NodeVersions, tr.Tallies.WayVersions),
		fmt.Sprintf("changesets  %d (%d import)", tr.Tallies.Changesets, len(tr.ImportChangesets)),
		"attribute ×0.6", "growing over 4 months", "parallel trends fail", "never upload",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("summary lacks %q:\n%s", want, out)
		}
	}
	for _, name := range []string{sim.HistoryFile, sim.ChangesetsFile, sim.DistrictsFile} {
		if _, err := os.Stat(filepath.Join(dir, name)); err != nil {
			t.Errorf("%s: %v", name, err)
		}
	}
	// Second run into the same folder: refused without --force, done with it.
	if code, _, stderr := execMain(t, nil, "simulate", "--out", dir, "--months", "3", "--treated", "1"); code != cli.ExitFailure || !strings.Contains(stderr, "pass --force") {
		t.Errorf("rerun without --force: exit %d, %q; want %d and a hint to pass --force", code, stderr, cli.ExitFailure)
	}
	if _, err := execRootOut(t, "simulate", "--out", dir, "--months", "3", "--treated", "1", "--force"); err != nil {
		t.Errorf("rerun with --force: %v", err)
	}
}

func TestSimulateBadFlags(t *testing.T) {
	for _, c := range []struct {
		name string
		args []string
		want string
	}{
		{"no out", nil, "--out"},
		{"zero months", []string{"--months", "0"}, "months"},
		{"more treated than districts", []string{"--cols", "3", "--rows", "3", "--treated", "10"}, "only 9"},
		{"negative multiplier", []string{"--effect-attribute", "-0.5"}, "attribute"},
		{"null with effects", []string{"--null", "--effect-geometry", "2"}, "--null"},
		{"bad start", []string{"--start", "2019-13"}, "--start"},
		{"zero scale", []string{"--scale", "0"}, "scale"},
		{"not a number", []string{"--months", "many"}, "months"},
		{"positional argument", []string{"world"}, "no arguments"},
	} {
		t.Run(c.name, func(t *testing.T) {
			dir := filepath.Join(t.TempDir(), "out")
			args := c.args
			if c.name != "no out" {
				args = append([]string{"--out", dir}, args...)
			}
			_, err := execRootOut(t, append([]string{"simulate"}, args...)...)
			if !errors.As(err, new(cli.UsageError)) {
				t.Fatalf("err = %v, want a usage error", err)
			}
			if !strings.Contains(err.Error(), c.want) {
				t.Errorf("error %q does not mention %q", err, c.want)
			}
			if _, err := os.Stat(dir); !errors.Is(err, os.ErrNotExist) {
				t.Errorf("%s was created for bad flags", dir)
			}
		})
	}
}
