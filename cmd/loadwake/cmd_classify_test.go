package main

import (
	"errors"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// TestClassifyCommand ingests a real way history (way 6394949 with all its
// node versions, from the osm module's testdata copied to ingest/testdata)
// and classifies it. The way's own events are worked by hand in
// layers.TestWay6394949History: one new_feature, three bookkeeping events
// (way v2, v3, v5) and no deletion; the file holds 33 node versions
// (grep -c "<node") and 5 way versions.
func TestClassifyCommand(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")

	out, _, err := execRoot(t, "--store", store, "classify")
	if err != nil {
		t.Fatalf("classify: %v", err)
	}
	for _, re := range []string{`node\s+33\b`, `way\s+5\b`, `new_feature\s+1\b`, `deletion\s+0\b`, `bookkeeping\s+3\b`} {
		if !regexp.MustCompile(re).MatchString(out) {
			t.Errorf("classify output lacks %s:\n%s", re, out)
		}
	}
	out2, _, err := execRoot(t, "--store", store, "classify")
	if err != nil || !strings.Contains(out2, "up to date") {
		t.Errorf("second classify: err %v, output:\n%s", err, out2)
	}
	out3, _, err := execRoot(t, "--store", store, "-q", "classify", "--force")
	if err != nil || strings.Contains(out3, "up to date") || !strings.Contains(out3, "new_feature") {
		t.Errorf("classify --force: err %v, output:\n%s", err, out3)
	}

	bad := filepath.Join(t.TempDir(), "bad.yaml")
	if err := os.WriteFile(bad, []byte("feature_classes: [\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, _, err := execRoot(t, "--store", store, "classify", "--rules", bad); err == nil || !strings.Contains(err.Error(), "bad.yaml") {
		t.Errorf("bad rule file: err %v, want one naming the file", err)
	}
	if _, _, err := execRoot(t, "--store", filepath.Join(t.TempDir(), "none"), "classify"); err == nil || !strings.Contains(err.Error(), "no store") {
		t.Errorf("missing store: err %v", err)
	}
	if _, _, err := execRoot(t, "--store", store, "classify", "extra"); !errors.As(err, new(cli.UsageError)) {
		t.Errorf("extra argument: err %v, want a usage error", err)
	}
}
