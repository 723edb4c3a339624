package cli

import (
	"bytes"
	"fmt"
	"regexp"
	"strings"
	"testing"

	"github.com/paulmach/osm"
	"github.com/rivo/uniseg"
)

// drawnLines splits what a progress display wrote into the lines it drew:
// the text between carriage returns and ANSI line clears.
func drawnLines(t testing.TB, out string) []string {
	t.Helper()
	out = strings.ReplaceAll(out, "\033[2K", "\r")
	out = regexp.MustCompile("\033\\[[0-9;]*[A-Za-z]").ReplaceAllString(out, "")
	var lines []string
	for _, l := range strings.Split(out, "\r") {
		if strings.TrimSpace(l) != "" {
			lines = append(lines, l)
		}
	}
	return lines
}

// TestProgressFitsWidth draws the ingest bar of a long path, the classify
// bar and a spinner at several terminal widths: no line is wider than the
// terminal, the ingest bar names the file by its base name, bars with a
// known total show the time left.
func TestProgressFitsWidth(t *testing.T) {
	path := "/home/reviewer/downloads/history-extracts/north-america/us/delaware-internal-history-2024-06-01.osh.pbf"
	for _, width := range []int{40, 60, 80, 120} {
		t.Run(fmt.Sprintf("%d columns", width), func(t *testing.T) {
			var buf bytes.Buffer
			p := &Progress{w: &buf, width: width} // no throttle: every update drawn
			ip := p.Ingest()
			ip.Start(path, 14_000_000)
			ip.Update(6_100_000, 400_000)
			ip.Update(14_000_000, 800_000)
			ip.Finish()
			hook, done := p.Classify(300)
			hook(osm.TypeNode, 100)
			hook(osm.TypeNode, 150)
			hook(osm.TypeWay, 100)
			done()
			p.Step("audit imp-6143: study and estimates")()
			lines := drawnLines(t, buf.String())
			if len(lines) < 3 {
				t.Fatalf("drew %d lines: %q", len(lines), buf.String())
			}
			for _, l := range lines {
				if w := uniseg.StringWidth(l); w > width {
					t.Errorf("line of %d columns on a %d-column terminal: %q", w, width, l)
				}
				if strings.Contains(l, "/home/reviewer") {
					t.Errorf("line shows the whole path: %q", l)
				}
			}
			all := strings.Join(lines, "\n")
			if name := map[bool]string{true: "ingest de", false: "ingest delaware"}[width < 60]; !strings.Contains(all, name) {
				t.Errorf("no line names the file:\n%s", all)
			}
			// The classify bar shows 250 only if the way versions are added to the 150 node versions.
			if width >= progressNarrow && !strings.Contains(all, "250/300") || !strings.Contains(all, " 83% ") {
				t.Errorf("classify bar did not count node and way versions together:\n%s", all)
			}
			if !regexp.MustCompile(`\[\d+s:\d+s\]`).MatchString(all) {
				t.Errorf("no elapsed:left time on the bars:\n%s", all)
			}
		})
	}
}

// TestProgressSilentOffTerminal: a display for a stderr that is not a
// terminal, or with --quiet, draws nothing and hands ingest no progress.
func TestProgressSilentOffTerminal(t *testing.T) {
	p := &Progress{}
	if p.Ingest() != nil {
		t.Error("ingest progress off a terminal")
	}
	hook, done := p.Classify(10)
	if hook != nil {
		t.Error("classify hook off a terminal")
	}
	done()
	p.Step("x")()
}

func TestFitText(t *testing.T) {
	cases := []struct {
		name, in string
		n        int
		want     string
	}{
		{"short", "ingest a.osm", 20, "ingest a.osm"},
		{"exact", "abcdef", 6, "abcdef"},
		{"long", "ingest delaware-history.osh.pbf", 12, "ingest dela…"},
		{"wide runes", "ingest 東京都.osm", 10, "ingest 東…"},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			got := FitText(c.in, c.n)
			if got != c.want || uniseg.StringWidth(got) > c.n {
				t.Errorf("fitText(%q, %d) = %q, want %q", c.in, c.n, got, c.want)
			}
		})
	}
}
