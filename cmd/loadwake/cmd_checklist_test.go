package main

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/loadwake/loadwake/audit/sim"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/rules"
)

// simulated is the invented world of simulatedStore, built once per test
// binary: the tests that use it only read its store and files.
var simulated struct {
	once  sync.Once
	dir   string // holds the world and the store; removed by TestMain
	store string
	world string
	truth *sim.Truth
	err   error
}

// simulatedStore generates a small invented world (audit/sim), ingests and
// classifies it into a store on disk and returns the store's directory, the
// world's folder and its truth. The first call builds it; later calls return
// the same world, which callers must not change.
func simulatedStore(t testing.TB) (string, string, *sim.Truth) {
	t.Helper()
	s := &simulated
	s.once.Do(func() {
		s.dir, s.err = os.MkdirTemp("", "loadwake-cmd-world-")
		if s.err == nil {
			s.store, s.world = filepath.Join(s.dir, "db"), filepath.Join(s.dir, "world")
			s.truth, s.err = buildSimulatedStore(s.store, s.world)
		}
	})
	if s.err != nil {
		t.Fatal(s.err)
	}
	return s.store, s.world, s.truth
}

// buildSimulatedStore generates the world into world and ingests and
// classifies it into the store dir.
func buildSimulatedStore(dir, world string) (*sim.Truth, error) {
	ctx := context.Background()
	cfg := sim.DefaultConfig()
	cfg.Cols, cfg.Rows, cfg.Months, cfg.Treated, cfg.Waves = 5, 5, 16, 5, 2
	cfg.ImportBuildings, cfg.ImportPOIs = 120, 10
	tr, err := sim.Generate(ctx, cfg, world, false)
	if err != nil {
		return nil, err
	}
	st, err := ingest.Open(dir, ingest.DefaultOptions())
	if err != nil {
		return nil, err
	}
	_, err = ingest.Ingest(ctx, st, []string{filepath.Join(world, sim.HistoryFile), filepath.Join(world, sim.ChangesetsFile)}, ingest.IngestOptions{})
	if err == nil {
		_, err = layers.Run(ctx, st, rules.Default(), layers.Options{})
	}
	if cerr := st.Close(); err == nil {
		err = cerr
	}
	return tr, err
}

func TestChecklistAndAssessCommands(t *testing.T) {
	if testing.Short() {
		t.Skip("simulated world: skipped with -short")
	}
	store, world, tr := simulatedStore(t)
	districts := filepath.Join(world, sim.DistrictsFile)
	tmp := t.TempDir()
	csList := filepath.Join(tmp, "changesets.txt")
	var ids []string
	for _, id := range tr.ImportChangesets {
		ids = append(ids, fmt.Sprint(id))
	}
	if err := os.WriteFile(csList, []byte(strings.Join(ids, "\n")), 0o644); err != nil {
		t.Fatal(err)
	}

	t.Run("checklist", func(t *testing.T) {
		js, md := filepath.Join(tmp, "cl.json"), filepath.Join(tmp, "cl.md")
		out, err := execRootOut(t, "--store", store, "checklist", "--units", districts, "--changesets", csList, "--json", js, "--md", md)
		if err != nil {
			t.Fatalf("checklist: %v\n%s", err, out)
		}
		// building:levels is planted as neglected on buildings (sim.DefaultConfig).
		if !strings.Contains(out, "building:levels") || !strings.Contains(out, "caution:") {
			t.Errorf("output lacks the planted key or the cautions:\n%s", out)
		}
		var back struct {
			Rows []struct {
				Key       string `json:"key"`
				Neglected bool   `json:"neglected"`
			} `json:"rows"`
		}
		data, err := os.ReadFile(js)
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(data, &back); err != nil || len(back.Rows) == 0 {
			t.Fatalf("JSON: %v, %d rows", err, len(back.Rows))
		}
		mdText, _ := os.ReadFile(md)
		if !strings.Contains(string(mdText), "- [ ] **building:levels**") {
			t.Errorf("markdown lacks the checklist line:\n%s", mdText)
		}
	})

	t.Run("snapshot", func(t *testing.T) {
		src := "source~" + tr.ImportAccounts[0].Dataset
		out, err := execRootOut(t, "--store", store, "checklist", "--provenance", src, "--types", "w")
		if err != nil {
			t.Fatalf("checklist --provenance: %v\n%s", err, out)
		}
		if !strings.Contains(out, "snapshot mode") || !strings.Contains(out, "without-provenance") {
			t.Errorf("output:\n%s", out)
		}
	})

	t.Run("checklist to stdout", func(t *testing.T) {
		t.Chdir(t.TempDir())
		code, out, stderr := execMain(t, nil, "--store", store, "checklist", "--units", districts, "--changesets", csList, "--md", "-")
		if code != cli.ExitOK || !strings.HasPrefix(out, "## Neglected tags") || !strings.Contains(stderr, "caution:") {
			t.Errorf("--md -: exit %d; want the Markdown on stdout and the text on stderr\nstdout:\n%s\nstderr:\n%s", code, out, stderr)
		}
		if _, err := os.Stat("-"); err == nil {
			t.Error("--md - wrote a file named -")
		}
	})

	t.Run("assess", func(t *testing.T) {
		// Three proposed benches: two at the corner of the invented region's
		// grid, one far away.
		lon, lat := tr.Region.OriginLon, tr.Region.OriginLat
		gj := fmt.Sprintf(`{"type":"FeatureCollection","features":[
			{"type":"Feature","geometry":{"type":"Point","coordinates":[%f,%f]},"properties":{"amenity":"bench","backrest":"yes"}},
			{"type":"Feature","geometry":{"type":"Point","coordinates":[%f,%f]},"properties":{"amenity":"bench","seats":4}},
			{"type":"Feature","geometry":{"type":"Point","coordinates":[%f,%f]},"properties":{"amenity":"bench"}}]}`,
			lon+0.001, lat+0.001, lon+0.002, lat+0.002, lon+0.5, lat+0.5)
		prop := filepath.Join(tmp, "benches.geojson")
		if err := os.WriteFile(prop, []byte(gj), 0o644); err != nil {
			t.Fatal(err)
		}
		js := filepath.Join(tmp, "assess.json")
		out, err := execRootOut(t, "--store", store, "assess", prop, "--units", districts, "--draws", "99", "--json", js)
		if err != nil {
			t.Fatalf("assess: %v\n%s", err, out)
		}
		for _, s := range []string{"3 features", "1 changeset(s)", "is a number", "ODbL", "imports mailing list", "Nearest past imports"} {
			if !strings.Contains(out, s) {
				t.Errorf("assessment lacks %q:\n%s", s, out)
			}
		}
		var back map[string]any
		data, _ := os.ReadFile(js)
		if err := json.Unmarshal(data, &back); err != nil {
			t.Fatal(err)
		}
		for _, k := range []string{"profile", "footprint", "duplicates", "nearest_imports", "expected_effects", "lacking_keys", "cautions"} {
			if _, ok := back[k]; !ok {
				t.Errorf("JSON lacks %q", k)
			}
		}
	})

	t.Run("imports --audit", func(t *testing.T) {
		dir := filepath.Join(tmp, "overview")
		csvPath := filepath.Join(tmp, "overview.csv")
		out, err := execRootOut(t, "--store", store, "imports", "--audit", "--units", districts, "--draws", "99", "--out", dir, "--csv", csvPath)
		if err != nil {
			t.Fatalf("imports --audit: %v\n%s", err, out)
		}
		var ov struct {
			Schema  string `json:"schema"`
			Imports []struct {
				Import  string `json:"import"`
				Effects []struct {
					Layer string `json:"layer"`
				} `json:"effects"`
				TopKeys []struct {
					Key string `json:"key"`
				} `json:"top_keys"`
				Error string `json:"error"`
			} `json:"imports"`
		}
		data, err := os.ReadFile(filepath.Join(dir, "overview.json"))
		if err != nil {
			t.Fatal(err)
		}
		if err := json.Unmarshal(data, &ov); err != nil || ov.Schema != "loadwake-overview/1" || len(ov.Imports) == 0 {
			t.Fatalf("overview.json: %v, schema %q, %d imports", err, ov.Schema, len(ov.Imports))
		}
		// building:levels is planted as neglected (sim.DefaultConfig).
		if r := ov.Imports[0]; r.Error != "" || len(r.Effects) == 0 || len(r.TopKeys) == 0 || r.TopKeys[0].Key != "building:levels" {
			t.Errorf("first row %+v", r)
		}
		for _, name := range []string{"overview.html", "overview.md", "overview.csv"} {
			if fi, err := os.Stat(filepath.Join(dir, name)); err != nil || fi.Size() == 0 {
				t.Errorf("%s: %v", name, err)
			}
		}
		if !strings.Contains(out, "every import audited over") || !strings.Contains(out, "wrote "+csvPath) {
			t.Errorf("output:\n%s", out)
		}
	})

	t.Run("errors", func(t *testing.T) {
		empty := filepath.Join(tmp, "empty.geojson")
		os.WriteFile(empty, []byte(`{"type":"FeatureCollection","features":[]}`), 0o644)
		broken := filepath.Join(tmp, "broken.osm")
		os.WriteFile(broken, []byte("<?xml version=\"1.0\"?>\n<osm version=\"0.6\">\n<node id=\"-1\" lat=\"1\" lon=\"2\"><tag k=\"amenity\" v=\"bench\"/></node>\n<node id=\"-2\" lat=\"x\" lon=\"2\"/>\n</osm>\n"), 0o644)
		text := filepath.Join(tmp, "notes.txt")
		os.WriteFile(text, []byte("just words\n"), 0o644)
		cases := []struct {
			name  string
			args  []string
			usage bool
			has   string
		}{
			{"assess without proposal", []string{"assess"}, true, "argument"},
			{"bad distance", []string{"assess", empty, "--distance", "0"}, true, "--distance"},
			{"empty proposal", []string{"assess", empty}, false, "empty.geojson: no features"},
			{"not a proposal", []string{"assess", text}, false, "notes.txt"},
			{"broken xml", []string{"assess", broken}, false, "broken.osm: line 4"},
			{"checklist without units", []string{"checklist", "--changesets", csList}, true, "--units"},
			{"bad provenance", []string{"checklist", "--provenance", "source~("}, true, "--provenance"},
			{"bad types", []string{"checklist", "--provenance", "tiger:*", "--types", "x"}, true, "--types"},
			{"imports study flag without --audit", []string{"imports", "--units", districts}, true, "add --audit"},
			{"imports --audit without units", []string{"imports", "--audit", "--out", tmp}, true, "--units"},
			{"imports --audit without output", []string{"imports", "--audit", "--units", districts}, true, "--out DIR"},
		}
		for _, c := range cases {
			t.Run(c.name, func(t *testing.T) {
				_, err := execRootOut(t, append([]string{"--store", store}, c.args...)...)
				if err == nil || errors.As(err, new(cli.UsageError)) != c.usage || !strings.Contains(err.Error(), c.has) {
					t.Errorf("err %v (usage %v); want usage=%v containing %q", err, errors.As(err, new(cli.UsageError)), c.usage, c.has)
				}
			})
		}
	})
}
