package loadwake_test

import (
	"go/parser"
	"go/token"
	"io/fs"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
)

const module = "github.com/loadwake/loadwake/"

// allowed lists, for each top-level package directory, the project packages its
// non-test files may import (DEVELOPERS.md, "Import rules"). cmd may use all.
var allowed = map[string][]string{
	"ingest": {"ingest"},
	"rules":  {"rules"},
	"layers": {"layers", "rules"},
	"audit":  {"audit", "layers", "rules"},
}

// TestImportLayering keeps imports pointing inward: it reads every non-test Go
// file's imports and fails on an import the layering forbids, and on cobra
// outside cmd.
func TestImportLayering(t *testing.T) {
	fset := token.NewFileSet()
	err := filepath.WalkDir(".", func(path string, d fs.DirEntry, err error) error {
		if err != nil {
			return err
		}
		if d.IsDir() {
			if name := d.Name(); path != "." && (strings.HasPrefix(name, ".") || name == "testdata") {
				return filepath.SkipDir
			}
			return nil
		}
		if !strings.HasSuffix(path, ".go") || strings.HasSuffix(path, "_test.go") {
			return nil
		}
		f, err := parser.ParseFile(fset, path, nil, parser.ImportsOnly)
		if err != nil {
			return err
		}
		top := strings.Split(filepath.ToSlash(path), "/")[0]
		for _, imp := range f.Imports {
			p, _ := strconv.Unquote(imp.Path.Value)
			if strings.HasPrefix(p, "github.com/spf13/cobra") && top != "cmd" {
				t.Errorf("%s imports cobra; only cmd may", path)
			}
			if !strings.HasPrefix(p, module) || top == "cmd" {
				continue
			}
			target := strings.Split(strings.TrimPrefix(p, module), "/")[0]
			ok := false
			for _, a := range allowed[top] {
				ok = ok || a == target
			}
			if !ok {
				t.Errorf("%s imports %s: %s may use only %v", path, p, top, allowed[top])
			}
		}
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
}
