package main

import (
	"errors"
	"os"
	"path/filepath"
	"regexp"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// TestExportCommand exports the real way history of way 6394949 (the osm
// module's testdata, copied to ingest/testdata), classified: its events and
// (empty) changesets, under the store folder's name.
func TestExportCommand(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")
	if _, _, err := execRoot(t, "--store", store, "-q", "classify"); err != nil {
		t.Fatal(err)
	}
	out := t.TempDir()
	stdout, _, err := execRoot(t, "--store", store, "export", "events", "--out", out, "--store-id", "delaware")
	if err != nil {
		t.Fatalf("export events: %v", err)
	}
	if !regexp.MustCompile(`exported \d+ events of store delaware into \d+ files`).MatchString(stdout) {
		t.Errorf("output: %s", stdout)
	}
	if _, err := os.Stat(filepath.Join(out, "_loadwake-delaware.json")); err != nil {
		t.Errorf("manifest: %v", err)
	}
	files, _ := filepath.Glob(filepath.Join(out, "month=*", "part-delaware-*.parquet"))
	if len(files) == 0 {
		t.Error("no Parquet file written")
	}
	if _, _, err := execRoot(t, "--store", store, "export", "changesets", "--out", t.TempDir()); err != nil {
		t.Errorf("export changesets with the folder's name as id: %v", err)
	}
	for name, args := range map[string][]string{
		"no out":   {"--store", store, "export", "events"},
		"bad rows": {"--store", store, "export", "events", "--out", out, "--rows-per-file", "0"},
		"extra":    {"--store", store, "export", "events", "--out", out, "x"},
	} {
		t.Run(name, func(t *testing.T) {
			if _, _, err := execRoot(t, args...); !errors.As(err, new(cli.UsageError)) {
				t.Errorf("err %v, want a usage error", err)
			}
		})
	}
	if _, _, err := execRoot(t, "--store", store, "export", "events", "--out", out, "--store-id", "a-b"); err == nil {
		t.Error("store id with '-' accepted")
	}
}
