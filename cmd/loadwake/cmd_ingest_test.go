package main

import (
	"context"
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/paulmach/osm"
	"github.com/paulmach/osm/osmxml"
)

// refCounts reads an OSM XML history with the reference decoder
// github.com/paulmach/osm/osmxml v0.8.0 and counts versions and objects.
func refCounts(t testing.TB, path string) (versions, nodes, ways int64) {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := osmxml.New(context.Background(), f)
	defer sc.Close()
	type key struct {
		t   osm.Type
		ref int64
	}
	seen := map[key]bool{}
	for sc.Scan() {
		versions++
		oid := sc.Object().ObjectID()
		id := key{oid.Type(), oid.Ref()}
		if !seen[id] {
			seen[id] = true
			switch id.t {
			case osm.TypeNode:
				nodes++
			case osm.TypeWay:
				ways++
			}
		}
	}
	if err := sc.Err(); err != nil {
		t.Fatal(err)
	}
	return versions, nodes, ways
}

// TestIngestAndStatsCommands ingests the history of way 6394949 (from the
// osm module's annotate/testdata, copied to ingest/testdata) and checks the
// stats against the reference decoder's counts.
func TestIngestAndStatsCommands(t *testing.T) {
	store := filepath.Join(t.TempDir(), "db")
	file := filepath.Join("..", "..", "ingest", "testdata", "way_6394949.osm")
	versions, nodes, ways := refCounts(t, file)

	out, errOut, err := execRoot(t, "--store", store, "ingest", file)
	if err != nil {
		t.Fatalf("ingest: %v\n%s", err, errOut)
	}
	if errOut != "" {
		t.Errorf("no progress expected off a terminal, got %q", errOut)
	}
	if !strings.Contains(out, "way_6394949.osm: osm-xml") || !regexp.MustCompile(`ingested 1 files: \d+ new versions, 0 conflicts`).MatchString(out) {
		t.Errorf("ingest output:\n%s", out)
	}
	out, _, err = execRoot(t, "--store", store, "ingest", file)
	if err != nil || !strings.Contains(out, "already ingested") {
		t.Errorf("second ingest: %v\n%s", err, out)
	}

	out, _, err = execRoot(t, "--store", store, "stats", "--json", "-")
	if err != nil {
		t.Fatal(err)
	}
	var got statsJSON
	if err := json.Unmarshal([]byte(out), &got); err != nil {
		t.Fatalf("stats --json: %v\n%s", err, out)
	}
	// ingest ran the classification pass: the way's five versions became
	// events (layers' own tests work that history out by hand).
	if got.Layers == nil || got.Layers.Versions["way"] != 5 || got.Layers.Events["new_feature"] < 1 {
		t.Errorf("classification after ingest: %+v", got.Layers)
	}
	if got.Versions != versions || got.Nodes != nodes || got.Ways != ways || got.Relations != 0 || len(got.Files) != 1 {
		t.Errorf("stats %+v; reference decoder: %d versions, %d nodes, %d ways", got, versions, nodes, ways)
	}
	// The way lies in Oakland, California (about 37.8 N, 122.2 W; the file's first node is at 37.8191887, -122.2263618).
	if len(got.BBox) != 4 || got.BBox[0] > -122.2263618 || got.BBox[1] > 37.8191887 || got.BBox[2] < -122.2263618 || got.BBox[3] < 37.8191887 {
		t.Errorf("bbox %v", got.BBox)
	}

	// time range: the earliest and latest timestamp attributes in the file (sort of grep -o 'timestamp="[^"]*"').
	out, _, err = execRoot(t, "--store", store, "stats")
	if err != nil {
		t.Fatal(err)
	}
	for _, re := range []string{`(?m)^ways\s+1\s+5$`, `(?m)^files\s+1$`, `(?m)^time range\s+2007-09-17T06:27:00Z \.\. 2016-07-25T18:57:02Z$`, `way_6394949\.osm  osm-xml`, `(?m)^events per layer$`} {
		if !regexp.MustCompile(re).MatchString(out) {
			t.Errorf("stats output lacks %s:\n%s", re, out)
		}
	}
}

func TestIngestCommandErrors(t *testing.T) {
	dir := t.TempDir()
	store := filepath.Join(dir, "db")
	bad := writeBadOSM(t, dir)
	cases := []struct {
		name  string
		args  []string
		usage bool
		want  string
	}{
		{"no files", []string{"--store", store, "ingest"}, true, "at least one FILE"},
		{"missing file", []string{"--store", store, "ingest", filepath.Join(dir, "nope.osm")}, false, "nope.osm"},
		{"malformed file", []string{"--store", store, "ingest", bad}, false, "bad.osm: line 2"},
		{"stats without store", []string{"--store", filepath.Join(dir, "none"), "stats"}, false, "no store at"},
		{"stats with argument", []string{"--store", store, "stats", "x"}, true, ""},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := execRoot(t, tc.args...)
			if err == nil {
				t.Fatal("no error")
			}
			if errors.As(err, new(cli.UsageError)) != tc.usage {
				t.Errorf("usage error %v, want %v: %v", !tc.usage, tc.usage, err)
			}
			if !strings.Contains(err.Error(), tc.want) {
				t.Errorf("error %q lacks %q", err, tc.want)
			}
		})
	}
}
