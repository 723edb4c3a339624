package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"regexp"
	"strconv"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
)

// The boxes the README's "Your own area" commands get for its
// LEFT,BOTTOM,RIGHT,TOP. The osm module's fixtures come from different
// places, so each osmium command gets a box that cuts its own file:
// regionBox takes part of the history of relation 2714790 (its visible
// nodes span -122.279..-122.204 E, 37.759..37.845 N, read off `osmium cat
// -f opl`); changesetBox overlaps the first of the two changesets of
// changesets_36947117.osm (5.155..5.253 E, 52.702..52.724 N) but not the
// second (5.321..5.331 E, 51.587..51.603 N), read off the file.
const (
	readmeBox    = "LEFT,BOTTOM,RIGHT,TOP"
	regionBox    = "-122.26,37.78,-122.22,37.83"
	changesetBox = "5.1,52.6,5.3,52.8"
)

// osmiumCount runs `osmium fileinfo -e` on path and returns the number it
// gives for what ("nodes", "ways", "relations", "changesets").
func osmiumCount(t testing.TB, path, what string) int64 {
	t.Helper()
	out, err := exec.Command("osmium", "fileinfo", "-e", path).CombinedOutput()
	if err != nil {
		t.Fatalf("osmium fileinfo %s: %v\n%s", path, err, out)
	}
	m := regexp.MustCompile(`Number of ` + what + `: (\d+)`).FindSubmatch(out)
	if m == nil {
		t.Fatalf("osmium fileinfo %s: no count of %s\n%s", path, what, out)
	}
	n, _ := strconv.ParseInt(string(m[1]), 10, 64)
	return n
}

// osmiumVersions counts the versions of an OSM file as osmium reads them:
// the lines of its OPL form, one per version.
func osmiumVersions(t testing.TB, path string) int64 {
	t.Helper()
	out, err := exec.Command("osmium", "cat", path, "-f", "opl").Output()
	if err != nil {
		t.Fatalf("osmium cat %s: %v", path, err)
	}
	return int64(bytes.Count(out, []byte("\n")))
}

// TestOwnAreaGuide runs the bash blocks of the README's "Your own area" on
// the osm module's real fixtures (copied to ingest/testdata; see its
// README) under the names the guide downloads: the history of relation
// 2714790 as history-latest.osm.pbf, changesets_36947117.osm.bz2 as
// changesets-latest.osm.bz2 and the minute diff minute_871.osc.gz as a day's
// 871.osc.gz. The store must then hold what osmium counts in the files the
// guide's osmium commands wrote. It needs osmium-tool (Debian's
// osmium-tool; .ci/run installs it) and skips without it.
func TestOwnAreaGuide(t *testing.T) {
	if testing.Short() {
		t.Skip("runs osmium and ingests")
	}
	if _, err := exec.LookPath("osmium"); err != nil {
		t.Skip("osmium not installed (apt-get install osmium-tool)")
	}
	readme, err := filepath.Abs(filepath.Join("..", "..", "README.md"))
	if err != nil {
		t.Fatal(err)
	}
	fixtures, err := filepath.Abs(filepath.Join("..", "..", "ingest", "testdata"))
	if err != nil {
		t.Fatal(err)
	}
	cmds := readmeCommands(t, readme, "bash")
	t.Chdir(t.TempDir())
	for name, src := range map[string]string{
		"history-latest.osm.pbf":    "relation_2714790.osh.pbf",
		"changesets-latest.osm.bz2": "changesets_36947117.osm.bz2",
		"871.osc.gz":                "minute_871.osc.gz",
	} {
		b, err := os.ReadFile(filepath.Join(fixtures, src))
		if err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(name, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	ran := map[string]bool{}
	for _, c := range cmds {
		where := fmt.Sprintf("README.md:%d", c.line)
		args := c.args
		switch {
		case args[0] == "osmium" && len(args) > 1:
			box := regionBox
			if args[1] == "changeset-filter" {
				box = changesetBox
			}
			for i, a := range args {
				args[i] = strings.ReplaceAll(a, readmeBox, box)
			}
			if out, err := exec.Command(args[0], args[1:]...).CombinedOutput(); err != nil {
				t.Fatalf("%s: %s: %v\n%s", where, strings.Join(args, " "), err, out)
			}
		case args[0] == "bin/loadwake":
			if code, out, stderr := execMain(t, nil, args[1:]...); code != cli.ExitOK {
				t.Fatalf("%s: %s: exit %d\n%s%s", where, strings.Join(args, " "), code, out, stderr)
			}
		default:
			t.Fatalf("%s: %q: the guide's bash blocks hold only osmium and bin/loadwake commands", where, strings.Join(args, " "))
		}
		ran[args[0]+" "+args[1]] = true
	}
	for _, want := range []string{"osmium extract", "osmium changeset-filter", "bin/loadwake --store"} {
		if !ran[want] {
			t.Errorf("the guide shows no %q command", want)
		}
	}

	st, err := ingest.Open("region.db", ingest.DefaultOptions())
	if err != nil {
		t.Fatal(err)
	}
	defer st.Close()
	stats, err := st.Stats(context.Background())
	if err != nil {
		t.Fatal(err)
	}
	region := osmiumVersions(t, "region.osh.pbf")
	diff := osmiumVersions(t, "871.osc.gz")
	all := osmiumVersions(t, "history-latest.osm.pbf")
	t.Logf("osmium: %d versions in the history, %d in the cut region, %d in the diff", all, region, diff)
	if region == 0 || region >= all {
		t.Fatalf("the cut kept %d of %d versions: the box does not cut the history", region, all)
	}
	// The minute diff lies in other places than the region (its bounding box
	// per osmium fileinfo spans -123.1..120.9 E), so nothing overlaps.
	if got := stats.Versions(); got != region+diff {
		t.Errorf("store holds %d versions, osmium counts %d in region.osh.pbf and %d in the diff", got, region, diff)
	}
	if got, want := stats.Changesets, osmiumCount(t, "region-changesets.osm.bz2", "changesets"); got != want || want != 1 {
		t.Errorf("store holds %d changesets, osmium counts %d in region-changesets.osm.bz2 (want 1 of the fixture's 2)", got, want)
	}

	// The guide's warning: a diff cut with osmium extract loses the ways
	// whose nodes it does not hold, even with a box around the whole world.
	cut := exec.Command("osmium", "extract", "--with-history", "-b", "-180,-90,180,90", "871.osc.gz", "-o", "cut.osc")
	if out, err := cut.CombinedOutput(); err != nil {
		t.Fatalf("osmium extract of the diff: %v\n%s", err, out)
	}
	before, after := osmiumCount(t, "871.osc.gz", "ways"), osmiumCount(t, "cut.osc", "ways")
	if before != 43 || after != 30 {
		t.Errorf("cutting the diff kept %d of %d ways; the README says 30 of 43 (13 lost)", after, before)
	}
}
