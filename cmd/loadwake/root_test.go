package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/rules"
)

// execRoot runs the root command with args, as a user would from a shell,
// and returns what it wrote to stdout and stderr.
func execRoot(t testing.TB, args ...string) (stdout, stderr string, err error) {
	t.Helper()
	root := newRootCommand(cli.NewGlobals(noEnv))
	var out, errb bytes.Buffer
	root.SetOut(&out)
	root.SetErr(&errb)
	root.SetArgs(args)
	err = root.ExecuteContext(context.Background())
	return out.String(), errb.String(), err
}

// execRootOut is execRoot for tests that read stdout only.
func execRootOut(t testing.TB, args ...string) (string, error) {
	t.Helper()
	out, _, err := execRoot(t, args...)
	return out, err
}

// ingestFixture ingests ingest/testdata/NAME into a new store, without the
// classification pass, and returns the store's directory.
func ingestFixture(t testing.TB, name string) string {
	t.Helper()
	store := filepath.Join(t.TempDir(), "db")
	st, err := ingest.Open(store, ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	_, err = ingest.Ingest(context.Background(), st, []string{filepath.Join("..", "..", "ingest", "testdata", name)}, ingest.IngestOptions{})
	if cerr := st.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		t.Fatal(err)
	}
	return store
}

// noEnv is an environment without variables.
func noEnv(string) string { return "" }

// execMain runs the command line as main does, with the environment env,
// and returns the exit code and what went to stdout and stderr.
func execMain(t testing.TB, env map[string]string, args ...string) (code int, stdout, stderr string) {
	t.Helper()
	var out, errb bytes.Buffer
	code = run(context.Background(), args, func(k string) string { return env[k] }, &out, &errb)
	return code, out.String(), errb.String()
}

// tigerRules writes into dir a rule file naming the TIGER import account by
// id (OSM wiki, TIGER page; from memory) and returns its path.
func tigerRules(t testing.TB, dir string) string {
	t.Helper()
	tiger := filepath.Join(dir, "tiger.yaml")
	src := strings.Replace(string(rules.DefaultYAML()), "  matchers:\n", "  matchers:\n    - name: tiger-account\n      account_ids: [7168]\n", 1)
	if err := os.WriteFile(tiger, []byte(src), 0o644); err != nil {
		t.Fatal(err)
	}
	return tiger
}

// writeBadOSM writes into dir an OSM XML file whose node on line 2 has a
// latitude that is not a number, and returns its path.
func writeBadOSM(t testing.TB, dir string) string {
	t.Helper()
	bad := filepath.Join(dir, "bad.osm")
	if err := os.WriteFile(bad, []byte("<osm>\n <node id=\"1\" version=\"1\" lat=\"x\" lon=\"2\" timestamp=\"2020-01-01T00:00:00Z\"/>\n</osm>\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	return bad
}

// TestMain runs the tests, then removes the world simulatedStore built.
func TestMain(m *testing.M) {
	code := m.Run()
	if simulated.dir != "" {
		os.RemoveAll(simulated.dir)
	}
	os.Exit(code)
}
