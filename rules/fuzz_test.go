package rules

import (
	"errors"
	"os"
	"path/filepath"
	"testing"
)

// FuzzParse checks that no rule file makes Parse panic, that a rejected file
// gives problems unwrapping to ErrInvalid, each with a line and column inside
// the file, and that an accepted
// file's canonical form parses to the same hash.
func FuzzParse(f *testing.F) {
	f.Add(DefaultYAML())
	if b, err := os.ReadFile(filepath.Join("testdata", "broken.yaml")); err == nil {
		f.Add(b)
	}
	f.Add([]byte("format: 1\nfeature_classes: {keys: [{key: a, detail: value}]}\nkey_families: []\nimport_detection: {group_gap_days: 1, matchers: [{name: m, min_changes: 1}]}\n"))
	f.Add([]byte("a: &x [*x]\n"))
	f.Add([]byte("format: 1\nfeature_classes: {keys: []\n"))
	f.Add([]byte("format: 1\n\tfeature_classes: \"äö\": b"))
	f.Fuzz(func(t *testing.T, data []byte) {
		r, err := Parse("fuzz.yaml", data)
		if err != nil {
			var ps *Problems
			if !errors.As(err, &ps) || len(*ps) == 0 || !errors.Is(err, ErrInvalid) {
				t.Fatalf("error %v is not a non-empty *Problems", err)
			}
			endLine, endCol := endOf(data)
			for _, p := range *ps {
				if p.File != "fuzz.yaml" || p.Line < 1 || p.Column < 1 ||
					p.Line > endLine || p.Line == endLine && p.Column > endCol {
					t.Fatalf("problem %q has no position inside the file (it ends at %d:%d)", p.Error(), endLine, endCol)
				}
			}
			return
		}
		again, err := Parse("canonical.yaml", r.Canonical())
		if err != nil {
			t.Fatalf("canonical form rejected: %v\n%s", err, r.Canonical())
		}
		if again.Hash() != r.Hash() {
			t.Fatalf("canonical form changes the hash")
		}
	})
}
