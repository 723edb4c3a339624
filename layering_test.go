package loadwake_test

import (
	"go/parser"
	"go/token"
	"io/fs"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
)

const module = "github.com/loadwake/loadwake/"

// allowed lists, for each project package (its directory), the project
// packages its non-test files may import: imports point inward and down
// (DEVELOPERS.md, "Import rules", holds the same table). cmd and the packages
// under it (cmd/loadwake/internal/cli, the commands' shared plumbing) may use
// every package and are the only ones to import cobra; no package outside cmd
// may use cmd. A package missing from the table fails the test, so a new
// package states its place here.
var allowed = map[string][]string{
	"ingest/osmfile":           {},
	"ingest/internal/codec":    {},
	"ingest/internal/sortrun":  {"ingest/osmfile"},
	"ingest/internal/storedir": {},
	"ingest":                   {"ingest/osmfile", "ingest/internal/codec", "ingest/internal/sortrun", "ingest/internal/storedir"},
	"ingest/ingesttest":        {"ingest", "ingest/osmfile"},
	"rules":                    {},
	"layers":                   {"rules"},
	"layers/export":            {"layers"},

	// audit: leaves first, then the packages built on them.
	"audit/markdown":            {},
	"audit/spatial":             {},
	"audit/panel":               {},
	"audit/match":               {},
	"audit/infer":               {},
	"audit/sensitivity":         {},
	"audit/sim":                 {},
	"audit/sequential":          {},
	"audit/survival":            {},
	"audit/did/poisson":         {},
	"audit/episode":             {"layers", "rules"},
	"audit/did/internal/robust": {"audit/did/poisson"},
	"audit/did":                 {"audit/did/internal/robust", "audit/did/poisson", "audit/panel", "audit/infer", "audit/sensitivity"},
	"audit/study":               {"audit/episode", "audit/match", "audit/panel", "layers"},
	"audit/retention":           {"audit/study", "audit/survival", "layers"},
	"audit/checklist":           {"audit/markdown", "audit/study", "audit/episode", "audit/spatial", "layers", "rules"},
	// audit/proposal opens proposal files through ingest's content sniffing
	// and PBF reader (osmfile uses no project package, so no cycle).
	"audit/proposal": {"audit/checklist", "audit/did", "audit/episode", "audit/markdown", "audit/study",
		"audit/spatial", "ingest/osmfile", "layers", "rules"},
	"audit": {"audit/checklist", "audit/did", "audit/episode", "audit/infer", "audit/match", "audit/panel", "audit/proposal",
		"audit/retention", "audit/spatial", "audit/study", "audit/survival", "layers", "rules"},
	"audit/power":   {"audit/checklist", "audit/did", "audit/panel", "layers"},
	"audit/rollout": {"audit/did", "audit/markdown", "audit/panel", "audit/power", "audit/proposal", "audit/sequential", "layers"},
	"audit/report": {"audit", "audit/checklist", "audit/did", "audit/episode", "audit/markdown", "audit/match",
		"audit/panel", "audit/proposal", "audit/report/chart", "audit/retention", "audit/spatial", "audit/study", "layers"},
	"audit/report/chart": {"audit", "audit/did", "audit/match", "audit/retention", "audit/study", "layers"},

	// Test support, imported only by _test files.
	"audit/panel/paneltest":    {"audit/panel"},
	"audit/internal/reftest":   {},
	"audit/internal/simtest":   {"audit/checklist"},
	"audit/internal/worldtest": {"audit/episode", "audit/sim", "audit/spatial", "ingest", "layers", "rules"},
}

// TestImportLayering keeps imports pointing inward: it reads every non-test Go
// file's imports and fails on an import the table forbids, on a package
// missing from the table, on any import of cmd, and on cobra outside cmd.
func TestImportLayering(t *testing.T) {
	fset := token.NewFileSet()
	seen := map[string]bool{}
	err := filepath.WalkDir(".", func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			if name := d.Name(); path != "." && (strings.HasPrefix(name, ".") || name == "testdata" || name == "node_modules") {
				return filepath.SkipDir
			}
			return nil
		}
		if !strings.HasSuffix(path, ".go") || strings.HasSuffix(path, "_test.go") {
			return nil
		}
		pkg := filepath.ToSlash(filepath.Dir(path))
		if pkg == "." {
			return nil
		}
		f, err := parser.ParseFile(fset, path, nil, parser.ImportsOnly)
		if err != nil {
			return err
		}
		inCmd := pkg == "cmd" || strings.HasPrefix(pkg, "cmd/")
		rules, known := allowed[pkg]
		if !known && !inCmd && !seen[pkg] {
			t.Errorf("package %s is not in the layering table; add it with the packages it may use", pkg)
		}
		seen[pkg] = true
		for _, imp := range f.Imports {
			p, _ := strconv.Unquote(imp.Path.Value)
			if strings.HasPrefix(p, "github.com/spf13/cobra") && !inCmd {
				t.Errorf("%s imports cobra; only cmd may", path)
			}
			target, own := strings.CutPrefix(p, module)
			if !own {
				continue
			}
			if (target == "cmd" || strings.HasPrefix(target, "cmd/")) && !inCmd {
				t.Errorf("%s imports %s: no package outside cmd may import cmd", path, p)
			}
			if !inCmd && !slices.Contains(rules, target) {
				t.Errorf("%s imports %s: %s may use only %v", path, p, pkg, rules)
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	for pkg := range allowed {
		if !seen[pkg] {
			t.Errorf("layering table names %s, which has no Go files", pkg)
		}
	}
}
