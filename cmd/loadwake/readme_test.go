package main

import (
	"bufio"
	"encoding/json"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
)

// readmeCommand is one command line of a README code block.
type readmeCommand struct {
	line int      // line in the README
	args []string // words after the shell's quote removal
}

// readmeCommands returns the command lines of the README's code blocks
// fenced as lang, continuation lines joined.
func readmeCommands(t testing.TB, path, lang string) []readmeCommand {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	var cmds []readmeCommand
	in, n, start, pending := false, 0, 0, ""
	sc := bufio.NewScanner(f)
	for sc.Scan() {
		n++
		text := sc.Text()
		fence := strings.TrimSpace(text) // blocks inside list items are indented
		switch {
		case !in && fence == "```"+lang:
			in = true
			continue
		case in && fence == "```":
			in = false
			continue
		case !in:
			continue
		}
		if pending == "" {
			start = n
		}
		if cont, ok := strings.CutSuffix(text, "\\"); ok {
			pending += cont + " "
			continue
		}
		words, err := shellWords(pending + text)
		pending = ""
		if err != nil {
			t.Fatalf("%s:%d: %v", path, start, err)
		}
		if len(words) > 0 {
			cmds = append(cmds, readmeCommand{line: start, args: words})
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return cmds
}

// shellWords splits a line as a POSIX shell would for the simple commands
// the README shows: words, single and double quotes, backslash escapes and
// a # comment. Anything else a shell would treat specially is refused, so
// that a README command runs the same here and in a shell.
func shellWords(s string) ([]string, error) {
	var words []string
	var w strings.Builder
	inWord := false
	for i := 0; i < len(s); i++ {
		c := s[i]
		switch {
		case c == ' ' || c == '\t':
			if inWord {
				words = append(words, w.String())
				w.Reset()
				inWord = false
			}
		case c == '#' && !inWord:
			return words, nil
		case c == '\'':
			j := strings.IndexByte(s[i+1:], '\'')
			if j < 0 {
				return nil, errors.New("unclosed single quote")
			}
			w.WriteString(s[i+1 : i+1+j])
			i += j + 1
			inWord = true
		case c == '"':
			j := strings.IndexByte(s[i+1:], '"')
			if j < 0 {
				return nil, errors.New("unclosed double quote")
			}
			if q := s[i+1 : i+1+j]; strings.ContainsAny(q, "$`\\") {
				return nil, fmt.Errorf("double-quoted %q holds shell syntax the test does not run", q)
			} else {
				w.WriteString(q)
			}
			i += j + 1
			inWord = true
		case c == '\\' && i+1 < len(s):
			i++
			w.WriteByte(s[i])
			inWord = true
		case strings.IndexByte("|&;<>()$`*?[{~", c) >= 0 && !(c == '>' && !inWord):
			return nil, fmt.Errorf("%q: shell syntax the test does not run (only words, quotes, # comments and > FILE)", string(c))
		default:
			w.WriteByte(c)
			inWord = true
		}
	}
	if inWord {
		words = append(words, w.String())
	}
	return words, nil
}

func TestShellWords(t *testing.T) {
	cases := []struct {
		name, in string
		want     []string
		err      bool
	}{
		{"plain", "bin/loadwake stats --json -", []string{"bin/loadwake", "stats", "--json", "-"}, false},
		{"comment", "bin/loadwake rules show   # the built-in rules", []string{"bin/loadwake", "rules", "show"}, false},
		{"single quotes", "a --provenance 'source~address dataset' --md -", []string{"a", "--provenance", "source~address dataset", "--md", "-"}, false},
		{"double quotes", `a "b c"d`, []string{"a", "b cd"}, false},
		{"escape", `a b\ c`, []string{"a", "b c"}, false},
		{"hash inside a word", "a b#c", []string{"a", "b#c"}, false},
		{"redirect", "a > f", []string{"a", ">", "f"}, false},
		{"pipe", "a | jq .", nil, true},
		{"variable", "a $HOME", nil, true},
		{"glob", "a *.osc", nil, true},
		{"unclosed quote", "a 'b", nil, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got, err := shellWords(c.in)
			if (err != nil) != c.err || !slices.Equal(got, c.want) {
				t.Errorf("shellWords(%q) = %q, %v; want %q (error %v)", c.in, got, err, c.want, c.err)
			}
		})
	}
}

// readmeImport is the import id the README's commands use: the largest
// import of the default demo (seed 1, 8×8 districts), as `make demo` prints it.
const readmeImport = "imp-6143"

// TestReadmeCommands runs a small demo in a temporary folder, then every
// command of the README's sh blocks there, as written, with the import id
// of that smaller world in place of the default demo's. Each must exit 0.
func TestReadmeCommands(t *testing.T) {
	if testing.Short() {
		t.Skip("runs a small demo and every README command")
	}
	readme, err := filepath.Abs(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	cmds := readmeCommands(t, readme, "sh")
	t.Chdir(t.TempDir())
	if code, out, stderr := execMain(t, nil, "demo", "--out", "demo-out", "--grid", "4", "--scale", "0.3", "--draws", "99"); code != cli.ExitOK {
		t.Fatalf("demo: exit %d\n%s%s", code, out, stderr)
	}
	var rep struct {
		Import struct {
			ID string `json:"id"`
		} `json:"import"`
	}
	b, err := os.ReadFile(filepath.Join("demo-out", "report", "report.json"))
	if err != nil || json.Unmarshal(b, &rep) != nil || rep.Import.ID == "" {
		t.Fatalf("the demo's report.json: %v", err)
	}
	env := map[string]string{}
	ran := map[string]bool{}
	for _, c := range cmds {
		where := fmt.Sprintf("README.md:%d", c.line)
		args := c.args
		if args[0] == "export" {
			k, v, ok := strings.Cut(args[1], "=")
			if len(args) != 2 || !ok {
				t.Fatalf("%s: export takes one NAME=VALUE", where)
			}
			env[k] = v
			continue
		}
		if args[0] != "bin/loadwake" || len(args) < 2 {
			t.Fatalf("%s: %q: a README sh block holds only bin/loadwake commands and export lines", where, strings.Join(args, " "))
		}
		args = args[1:]
		redirect := ""
		if i := slices.Index(args, ">"); i >= 0 {
			if i != len(args)-2 {
				t.Fatalf("%s: > must be followed by one FILE at the end", where)
			}
			redirect, args = args[i+1], args[:i]
		}
		for i, a := range args {
			args[i] = strings.ReplaceAll(a, readmeImport, rep.Import.ID)
		}
		code, out, stderr := execMain(t, env, args...)
		if code != cli.ExitOK {
			t.Errorf("%s: loadwake %s: exit %d\n%s", where, strings.Join(args, " "), code, stderr)
			continue
		}
		if redirect != "" {
			if err := os.WriteFile(redirect, []byte(out), 0o644); err != nil {
				t.Fatal(err)
			}
		}
		ran[args[0]] = true
	}
	for _, name := range []string{"version", "stats", "completion", "ingest", "rules", "classify", "imports", "panel", "audit", "report", "checklist", "assess", "plan", "estimate", "simulate"} {
		if !ran[name] {
			t.Errorf("the README's sh blocks show no loadwake %s command", name)
		}
	}
	if b, err := os.ReadFile(filepath.Join("demo-out", "loadwake.bash")); err != nil || !strings.Contains(string(b), "__start_loadwake") {
		t.Errorf("the completion script the README writes: %v", err)
	}
}
