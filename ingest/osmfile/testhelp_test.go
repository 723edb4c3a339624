package osmfile

import (
	"context"
	"os"
	"os/exec"
	"path/filepath"
	"runtime/debug"
	"strings"
	"testing"

	"github.com/paulmach/osm"
)

// osmModuleTestdata returns the path of name (for example
// "../testdata/delaware-latest.osm.pbf" or "annotate/testdata/way_6394949.osm")
// inside the github.com/paulmach/osm module in the module cache, the open
// data that module ships. It skips the test when the module is not there.
func osmModuleTestdata(tb testing.TB, name string) string {
	tb.Helper()
	version := "v0.8.0"
	if bi, ok := debug.ReadBuildInfo(); ok {
		for _, d := range bi.Deps {
			if d.Path == "github.com/paulmach/osm" {
				version = d.Version
			}
		}
	}
	cache := os.Getenv("GOMODCACHE")
	if cache == "" {
		out, err := exec.Command("go", "env", "GOMODCACHE").Output()
		if err != nil {
			tb.Skipf("cannot find the module cache (go env GOMODCACHE: %v)", err)
		}
		cache = strings.TrimSpace(string(out))
	}
	p := filepath.Join(cache, "github.com", "paulmach", "osm@"+version, filepath.FromSlash(name))
	if _, err := os.Stat(p); err != nil {
		tb.Skipf("open data of github.com/paulmach/osm@%s not in the module cache (%v); run go mod download github.com/paulmach/osm", version, err)
	}
	return p
}

// readAll reads every item of the file at path.
func readAll(tb testing.TB, path string) (Format, []Item, error) {
	tb.Helper()
	r, err := OpenFile(context.Background(), path, ReadOptions{})
	if err != nil {
		return FormatUnknown, nil, err
	}
	defer r.Close()
	var items []Item
	for r.Scan() {
		items = append(items, r.Item())
	}
	return r.Format(), items, r.Err()
}

// mustReadAll is readAll failing the test on an error.
func mustReadAll(tb testing.TB, path string) (Format, []Item) {
	tb.Helper()
	f, items, err := readAll(tb, path)
	if err != nil {
		tb.Fatalf("read %s: %v", path, err)
	}
	return f, items
}

// counts tallies items by kind.
type counts struct {
	Nodes, Ways, Relations, Changesets, Invisible int
	Create, Modify, Delete                        int
}

func countItems(items []Item) counts {
	var c counts
	for _, it := range items {
		switch it.Action {
		case ActionCreate:
			c.Create++
		case ActionModify:
			c.Modify++
		case ActionDelete:
			c.Delete++
		}
		if it.Changeset != nil {
			c.Changesets++
			continue
		}
		switch o := it.Object.(type) {
		case *osm.Node:
			c.Nodes++
			if !o.Visible {
				c.Invisible++
			}
		case *osm.Way:
			c.Ways++
			if !o.Visible {
				c.Invisible++
			}
		case *osm.Relation:
			c.Relations++
			if !o.Visible {
				c.Invisible++
			}
		}
	}
	return c
}

// writeTemp writes data to a file called name in a fresh directory.
func writeTemp(tb testing.TB, name string, data []byte) string {
	tb.Helper()
	p := filepath.Join(tb.TempDir(), name)
	if err := os.WriteFile(p, data, 0o644); err != nil {
		tb.Fatal(err)
	}
	return p
}

func readFile(tb testing.TB, path string) []byte {
	tb.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		tb.Fatal(err)
	}
	return b
}
