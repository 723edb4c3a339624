package main

import (
	"errors"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/rules"
)

// runRoot executes the root command with args and returns stdout, stderr and the error.
func TestRulesShow(t *testing.T) {
	out, _, err := execRoot(t, "rules", "show")
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out, string(rules.DefaultYAML())) || !strings.Contains(out, rules.Default().Hash()) {
		t.Errorf("rules show does not print the built-in rules and hash:\n%.300s", out)
	}
	// What show prints is a valid rule file with the same rules.
	dir := t.TempDir()
	f := filepath.Join(dir, "mine.yaml")
	if err := os.WriteFile(f, []byte(out), 0o644); err != nil {
		t.Fatal(err)
	}
	out2, _, err := execRoot(t, "rules", "show", "--rules", f)
	if err != nil {
		t.Fatal(err)
	}
	if !strings.Contains(out2, "sha256 "+rules.Default().Hash()) || !strings.Contains(out2, "group_gap_days: 365") {
		t.Errorf("rules show --file:\n%.300s", out2)
	}
}

func TestRulesCheck(t *testing.T) {
	dir := t.TempDir()
	good := filepath.Join(dir, "good.yaml")
	if err := os.WriteFile(good, rules.DefaultYAML(), 0o644); err != nil {
		t.Fatal(err)
	}
	bad := filepath.Join(dir, "bad.yaml")
	src := "format: 1\nfeature_classes:\n  keys: [{key: highway, detail: values}]\nkey_families: []\nimport_detection:\n  group_gap_days: 2\n  matchers: [{name: x, account_names: ['(']}]\nextra: 1\n"
	if err := os.WriteFile(bad, []byte(src), 0o644); err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		name    string
		args    []string
		wantOut []string
		wantErr string
		usage   bool
	}{
		{"good", []string{"rules", "check", good}, []string{good + ": ok, sha256 " + rules.Default().Hash()}, "", false},
		{"bad", []string{"rules", "check", bad}, []string{
			bad + `:3:33: detail "values" is not one of value, key, listed`,
			bad + `:7:40: bad regular expression "(": missing closing ): ` + "`(`",
			bad + `:8:1: unknown field "extra" in the rule file (known: format, feature_classes, key_families, import_detection)`,
		}, "3 problem(s)", false},
		{"missing file", []string{"rules", "check", filepath.Join(dir, "none.yaml")}, nil, "none.yaml", false},
		{"no file", []string{"rules", "check"}, nil, "takes one rule file", true},
		{"stray argument", []string{"rules", "show", "x"}, nil, "takes no arguments", true},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			out, _, err := execRoot(t, tt.args...)
			if tt.wantErr == "" && err != nil || tt.wantErr != "" && (err == nil || !strings.Contains(err.Error(), tt.wantErr)) {
				t.Fatalf("err = %v, want %q", err, tt.wantErr)
			}
			if isUsage := errors.As(err, new(cli.UsageError)); isUsage != tt.usage {
				t.Errorf("usage error = %v, want %v", isUsage, tt.usage)
			}
			got := strings.Split(strings.TrimSpace(out), "\n")
			if len(tt.wantOut) == 0 {
				return
			}
			if strings.Join(got, "\n") != strings.Join(tt.wantOut, "\n") {
				t.Errorf("output:\n%s\nwant:\n%s", out, strings.Join(tt.wantOut, "\n"))
			}
		})
	}
}
