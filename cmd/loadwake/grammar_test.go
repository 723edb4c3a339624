package main

import (
	"bytes"
	"context"
	"encoding/json"
	"os"
	"path/filepath"
	"runtime/debug"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// TestExitCodes runs command lines as main does and checks the exit code of
// the README's table and the message: led by the command's path, followed by
// what to do.
func TestExitCodes(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")
	dir := t.TempDir()
	bad := writeBadOSM(t, dir)
	badRules := filepath.Join(dir, "bad.yaml")
	if err := os.WriteFile(badRules, []byte("format: 1\nextra: 1\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	missing := filepath.Join(dir, "missing.osm")
	cases := []struct {
		name   string
		args   []string
		code   int
		prefix string // stderr starts with it
		todo   string // the second line holds it
	}{
		{"version", []string{"version"}, cli.ExitOK, "", ""},
		{"version flag", []string{"--version"}, cli.ExitOK, "", ""},
		{"stats", []string{"--store", store, "stats"}, cli.ExitOK, "", ""},
		{"unknown command", []string{"frobnicate"}, cli.ExitUsage, `loadwake: unknown command "frobnicate"`, "loadwake --help"},
		{"unknown flag", []string{"stats", "--frobnicate"}, cli.ExitUsage, "loadwake stats: unknown flag: --frobnicate", "loadwake stats --help"},
		{"unknown subcommand", []string{"rules", "frobnicate"}, cli.ExitUsage, "loadwake rules: ", "loadwake rules --help"},
		{"missing argument", []string{"ingest"}, cli.ExitUsage, "loadwake ingest: ingest needs at least one FILE", "--help"},
		{"bad flag value", []string{"--store", store, "audit", "--units", "tiles:12", "--draws", "5"}, cli.ExitUsage, "loadwake audit: --draws must be at least 99", "--help"},
		{"import and account", []string{"--store", store, "audit", "--units", "tiles:12", "--import", "imp-1", "--account", "x"}, cli.ExitUsage,
			"loadwake audit: --import, --account name the import in different ways", "--help"},
		{"changesets and account", []string{"--store", store, "imports", "--changesets", "ids.txt", "--account", "x"}, cli.ExitUsage,
			"loadwake imports: --changesets, --account name the import", "--help"},
		{"provenance and units", []string{"--store", store, "checklist", "--provenance", "source", "--units", "tiles:12"}, cli.ExitUsage,
			"loadwake checklist: --provenance compares features across the whole store, without units", "--help"},
		{"estimator window beyond the panel", []string{"--store", store, "report", "--units", "tiles:12", "--out", dir, "--before", "6", "--window-before", "12"}, cli.ExitUsage,
			"loadwake report: --window-before 12 is longer than the panel's --before 6", "--help"},
		{"bad units", []string{"--store", store, "audit", "--units", "tiles:99", "--account", "7168"}, cli.ExitFailure, "loadwake audit: ", "check --units"},
		{"two outputs to stdout", []string{"--store", store, "checklist", "--units", "tiles:12", "--json", "-", "--md", "-"}, cli.ExitUsage,
			"loadwake checklist: only one of --json, --md and --csv can be -", "--help"},
		{"missing input file", []string{"--store", filepath.Join(dir, "new.db"), "ingest", missing}, cli.ExitFailure, "loadwake ingest: input file: ", "check the path"},
		{"folder as input file", []string{"--store", filepath.Join(dir, "new.db"), "ingest", dir}, cli.ExitFailure, "loadwake ingest: input file " + dir + ": is a folder", "name the files inside"},
		{"malformed input file", []string{"--store", filepath.Join(dir, "bad.db"), "ingest", bad}, cli.ExitFailure, "loadwake ingest: ", "fix or replace the file"},
		{"missing panel", []string{"estimate", "--panel", missing, "--outcome", "x"}, cli.ExitFailure, "loadwake estimate: panel: ", "check the path"},
		{"folder as panel", []string{"estimate", "--panel", dir, "--outcome", "x"}, cli.ExitFailure, "loadwake estimate: ", "name the files inside"},
		{"no store", []string{"--store", filepath.Join(dir, "none"), "stats"}, cli.ExitFailure, "loadwake stats: no store at", "loadwake ingest FILE"},
		{"bad rule file", []string{"rules", "check", badRules}, cli.ExitFailure, "loadwake rules check: " + badRules + ": ", "loadwake rules check FILE"},
		{"no such import", []string{"--store", store, "audit", "--units", "tiles:12", "--import", "imp-1"}, cli.ExitFailure, "loadwake audit: ", "loadwake imports"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			code, _, stderr := execMain(t, nil, c.args...)
			if code != c.code {
				t.Fatalf("exit %d, want %d; stderr:\n%s", code, c.code, stderr)
			}
			if !strings.HasPrefix(stderr, c.prefix) {
				t.Errorf("stderr %q, want it to start with %q", stderr, c.prefix)
			}
			lines := strings.Split(strings.TrimRight(stderr, "\n"), "\n")
			if c.todo != "" && (len(lines) < 2 || !strings.Contains(lines[len(lines)-1], c.todo)) {
				t.Errorf("stderr %q: the last line should say what to do (%q)", stderr, c.todo)
			}
		})
	}
}

// TestInterrupted checks the exit code and message after Ctrl-C (a context
// cancelled before the command starts): what the interruption left behind,
// not advice about a broken file.
func TestInterrupted(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")
	file := filepath.Join("..", "..", "ingest", "testdata", "way_6394949.osm")
	cases := []struct {
		name string
		args []string
		want string
	}{
		{"ingest", []string{"--store", filepath.Join(t.TempDir(), "db"), "ingest", file}, "rerun the same command to continue"},
		{"classify", []string{"--store", store, "classify", "--force"}, "rerun classify"},
		{"audit", []string{"--store", store, "audit", "--units", "tiles:16", "--account", "7168"}, "the store was only read and is unchanged"},
		{"stats", []string{"--store", store, "stats"}, "nothing was changed"},
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			var out, errb bytes.Buffer
			code := run(ctx, c.args, noEnv, &out, &errb)
			if code != cli.ExitInterrupted {
				t.Fatalf("exit %d, want %d; stderr %s", code, cli.ExitInterrupted, errb.String())
			}
			msg := errb.String()
			if !strings.HasPrefix(msg, "loadwake "+c.name+": interrupted\n") || !strings.Contains(msg, c.want) || strings.Contains(out.String()+msg, "fix the file") {
				t.Errorf("after an interruption, stdout:\n%s\nstderr:\n%s", out.String(), msg)
			}
		})
	}
}

func TestVersionOf(t *testing.T) {
	cases := []struct {
		name string
		info debug.BuildInfo
		want string
	}{
		{"test binary", debug.BuildInfo{GoVersion: "go1.26.0"}, "(devel), go1.26.0"},
		{"release", debug.BuildInfo{GoVersion: "go1.26.0", Main: debug.Module{Version: "v1.2.0"}}, "v1.2.0, go1.26.0"},
		{"checkout", debug.BuildInfo{GoVersion: "go1.26.0", Main: debug.Module{Version: "(devel)"}, Settings: []debug.BuildSetting{
			{Key: "vcs", Value: "git"}, {Key: "vcs.revision", Value: "db269cb0123456789abcdef0123456789abcdef0"},
			{Key: "vcs.time", Value: "2026-12-02T13:32:01Z"}, {Key: "vcs.modified", Value: "true"}}},
			"(devel), revision db269cb01234, 2026-12-02T13:32:01Z, modified, go1.26.0"},
		{"clean checkout", debug.BuildInfo{Main: debug.Module{Version: "v0.3.1-0.20261202133201-db269cb01234"}, Settings: []debug.BuildSetting{
			{Key: "vcs.revision", Value: "db269cb"}, {Key: "vcs.modified", Value: "false"}}},
			"v0.3.1-0.20261202133201-db269cb01234, revision db269cb"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			if got := cli.VersionOf(&c.info); got != c.want {
				t.Errorf("cli.VersionOf = %q, want %q", got, c.want)
			}
		})
	}
	_, out, _ := execMain(t, nil, "version")
	_, flag, _ := execMain(t, nil, "--version")
	if !strings.HasPrefix(out, "loadwake ") || out != flag {
		t.Errorf("loadwake version printed %q, --version %q; want the same line", out, flag)
	}
}

// TestStoreFromEnvironment: LOADWAKE_STORE is the default store, --store wins.
func TestStoreFromEnvironment(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")
	env := map[string]string{cli.EnvStore: store}
	code, out, stderr := execMain(t, env, "stats", "--json", "-")
	var got statsJSON
	if code != cli.ExitOK || json.Unmarshal([]byte(out), &got) != nil || got.Store != store || got.Ways != 1 {
		t.Errorf("stats with %s=%s: exit %d, %+v\n%s", cli.EnvStore, store, code, got, stderr)
	}
	code, _, stderr = execMain(t, env, "--store", filepath.Join(t.TempDir(), "none"), "stats")
	if code != cli.ExitFailure || !strings.Contains(stderr, "no store at") {
		t.Errorf("--store should override %s: exit %d, %s", cli.EnvStore, code, stderr)
	}
}

// TestOutputFlags checks --json FILE and --json - on stats, imports and
// rules-based commands: "-" puts the JSON alone on stdout and the text on stderr.
func TestOutputFlags(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")
	dir := t.TempDir()
	cases := []struct {
		name string
		args []string
	}{
		{"stats", []string{"stats"}},
		{"imports", []string{"imports"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			args := append([]string{"--store", store}, c.args...)
			code, out, stderr := execMain(t, nil, append(args, "--json", "-")...)
			if code != cli.ExitOK || !json.Valid([]byte(out)) {
				t.Fatalf("--json -: exit %d, stdout is not JSON:\n%s\nstderr:\n%s", code, out, stderr)
			}
			if stderr == "" {
				t.Error("--json -: the usual text should go to stderr")
			}
			file := filepath.Join(dir, c.name+".json")
			code, text, _ := execMain(t, nil, append(args, "--json", file)...)
			b, err := os.ReadFile(file)
			if code != cli.ExitOK || err != nil || !bytes.Equal(b, []byte(out)) {
				t.Errorf("--json FILE: exit %d, %v; file differs from --json - output", code, err)
			}
			if !strings.Contains(text, "wrote "+file) {
				t.Errorf("--json FILE: stdout does not say where the file went:\n%s", text)
			}
			if _, err := os.Stat(filepath.Join(dir, "-")); err == nil {
				t.Error("a file named - was written")
			}
		})
	}
}

// TestCompleteImport asks cobra's completion for --import values: the ids of
// the store's imports (the TIGER account of TestImportsCommand's rule file).
func TestCompleteImport(t *testing.T) {
	store := ingestFixture(t, "way_6394949.osm")
	tiger := tigerRules(t, t.TempDir())
	for _, cmd := range []string{"audit", "panel", "report", "checklist"} {
		t.Run(cmd, func(t *testing.T) {
			code, out, _ := execMain(t, nil, "__complete", "--store", store, cmd, "--rules", tiger, "--import", "")
			if code != cli.ExitOK || !strings.HasPrefix(out, "imp-448153\t") || !strings.Contains(out, "\n:4\n") {
				t.Errorf("completion of %s --import: exit %d\n%s", cmd, code, out)
			}
		})
	}
	code, out, _ := execMain(t, nil, "__complete", "--store", filepath.Join(t.TempDir(), "none"), "audit", "--import", "")
	if code != cli.ExitOK || !strings.HasPrefix(out, ":1\n") {
		t.Errorf("completion without a store: exit %d, %q; want the error directive", code, out)
	}
}
