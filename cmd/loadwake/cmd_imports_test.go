package main

import (
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/paulmach/osm"
)

// TestImportsCommand runs `loadwake imports` on a real way history (way
// 6394949 with its node versions, from the osm module's testdata, copied to
// ingest/testdata). Its first versions come from the 2007 TIGER import:
// account 7168 made nodes 53101285 (changeset 448153), 53142906 and 53142908
// and the way (changeset 448653), all version 1, the nodes carrying only
// source and tiger:* tags (read off the file). The file has no changeset
// metadata and no import=yes, so the built-in rules find nothing there.
func TestImportsCommand(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")
	dir := t.TempDir()
	tiger := tigerRules(t, dir)
	ids := filepath.Join(dir, "ids.txt")
	if err := os.WriteFile(ids, []byte("# the way's TIGER changeset\n448653\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	badIDs := filepath.Join(dir, "bad.txt")
	if err := os.WriteFile(badIDs, []byte("448653 4486S3\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	tigerBBox := []float64{-122.226779, 37.818127, -122.225979, 37.818727} // nodes 53142906, 53101285, 53142908
	tests := []struct {
		name       string
		args       []string
		id         string
		changesets []osm.ChangesetID
		created    int
		matchers   []string
	}{
		{"rules name the account", []string{"imports", "--rules", tiger, "--json", "-"}, "imp-448153", []osm.ChangesetID{448153, 448653}, 4, []string{"tiger-account"}},
		{"account id", []string{"imports", "--account", "7168", "--json", "-"}, "manual-448153", []osm.ChangesetID{448153, 448653}, 4, []string{"manual"}},
		{"changeset list", []string{"imports", "--changesets", ids, "--json", "-"}, "manual-448653", []osm.ChangesetID{448653}, 3, []string{"manual"}},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			out, _, err := execRoot(t, append([]string{"--store", store}, tt.args...)...)
			if err != nil {
				t.Fatal(err)
			}
			var eps []episode.Episode
			if err := json.Unmarshal([]byte(out), &eps); err != nil {
				t.Fatalf("output is not a JSON episode list: %v\n%s", err, out)
			}
			if len(eps) != 1 {
				t.Fatalf("got %d episodes, want 1:\n%s", len(eps), out)
			}
			e := eps[0]
			cs := e.Changesets
			if e.ID != tt.id || !slices.Equal(cs, tt.changesets) || e.Created != tt.created || e.Modified != 0 || e.Deleted != 0 {
				t.Errorf("episode %s %v created %d modified %d deleted %d, want %s %v created %d",
					e.ID, cs, e.Created, e.Modified, e.Deleted, tt.id, tt.changesets, tt.created)
			}
			if !slices.Equal(e.Matchers, tt.matchers) || len(e.Accounts) != 1 || e.Accounts[0].UID != 7168 {
				t.Errorf("matchers %v accounts %v", e.Matchers, e.Accounts)
			}
			if len(e.Classes) != 1 || e.Classes[0] != (episode.ClassCount{Class: "highway=residential", Count: 1}) {
				t.Errorf("classes %v, want the way's highway=residential once", e.Classes)
			}
			if e.FirstMonth != "2007-09" || e.LastMonth != "2007-09" {
				t.Errorf("months %s..%s, want 2007-09 (the versions' timestamps)", e.FirstMonth, e.LastMonth)
			}
			if tt.created == 4 && !slices.Equal(e.BBox, tigerBBox) {
				t.Errorf("bbox %v, want %v", e.BBox, tigerBBox)
			}
		})
	}

	out, _, err := execRoot(t, "--store", store, "imports")
	if err != nil || !strings.Contains(out, "no import episodes found") || !strings.Contains(out, "import guidelines") {
		t.Errorf("built-in rules: err %v, output:\n%s", err, out)
	}
	out, _, err = execRoot(t, "--store", store, "imports", "--rules", tiger)
	if err != nil || !strings.Contains(out, "imp-448153") || !strings.Contains(out, "highway=residential 1") {
		t.Errorf("table: err %v, output:\n%s", err, out)
	}
	if _, _, err := execRoot(t, "--store", store, "imports", "--changesets", badIDs); err == nil || !strings.Contains(err.Error(), "bad.txt:1:8") {
		t.Errorf("bad id list: err %v, want one naming bad.txt:1:8", err)
	}
	if _, _, err := execRoot(t, "--store", store, "imports", "--account", "nobody"); !errors.Is(err, episode.ErrNoImport) {
		t.Errorf("unknown account: err %v, want ErrNoImport", err)
	}
	if _, _, err := execRoot(t, "--store", filepath.Join(dir, "none"), "imports"); err == nil || !strings.Contains(err.Error(), "no store") {
		t.Errorf("missing store: err %v", err)
	}
	if _, _, err := execRoot(t, "--store", store, "imports", "extra"); !errors.As(err, new(cli.UsageError)) {
		t.Errorf("extra argument: err %v, want a usage error", err)
	}
}
