package main

import (
	"encoding/json"
	"path/filepath"
	"strings"
	"testing"
)

// TestUnitsCommand ingests the real Delaware boundary extract of
// audit/spatial/testdata (a snapshot PBF; provenance in its README) and
// writes admin units. The expected ids, names and ring counts are those of
// osmium-tool 1.15.0's export of the same file (same README).
func TestUnitsCommand(t *testing.T) {
	store := filepath.Join(t.TempDir(), "db")
	file := filepath.Join("..", "..", "audit", "spatial", "testdata", "delaware_boundaries.osm.pbf")
	if _, errOut, err := execRoot(t, "--store", store, "ingest", file); err != nil {
		t.Fatalf("ingest: %v\n%s", err, errOut)
	}
	type feature struct {
		Geometry struct {
			Type        string          `json:"type"`
			Coordinates [][][][]float64 `json:"coordinates"`
		} `json:"geometry"`
		Properties struct {
			ID   string  `json:"id"`
			Name string  `json:"name"`
			Area float64 `json:"area_m2"`
		} `json:"properties"`
	}
	for _, tc := range []struct {
		name    string
		args    []string
		ids     string // ids, comma separated
		names   string
		errText string
	}{
		{"counties of Delaware", []string{"--units", "admin:6,name=[KNS]*", "--geojson", "-"},
			"r1245077,r1245078,r1245079", "New Castle County,Kent County,Sussex County", ""},
		{"town by name", []string{"--units", "admin:8,name=Dover", "--geojson", "-"}, "r117178", "Dover", ""},
		{"incomplete relation named", []string{"--units", "admin:6", "--geojson", "-"}, "", "", "relation 935143 (Dorchester County)"},
		{"no such level", []string{"--units", "admin:3", "--geojson", "-"}, "", "", "no boundary=administrative relation"},
		{"bad date", []string{"--units", "admin:6", "--at", "2020", "--geojson", "-"}, "", "", "want YYYY-MM-DD"},
		{"missing output", []string{"--units", "admin:6"}, "", "", "--geojson are required"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			out, errOut, err := execRoot(t, append([]string{"--store", store, "units"}, tc.args...)...)
			if tc.errText != "" {
				if err == nil || !strings.Contains(err.Error(), tc.errText) {
					t.Fatalf("got %v, want an error with %q", err, tc.errText)
				}
				return
			}
			if err != nil {
				t.Fatalf("%v\n%s", err, errOut)
			}
			var fc struct {
				Type     string    `json:"type"`
				Features []feature `json:"features"`
			}
			if err := json.Unmarshal([]byte(out), &fc); err != nil {
				t.Fatalf("%v\n%.300s", err, out)
			}
			var ids, names []string
			for _, f := range fc.Features {
				ids = append(ids, f.Properties.ID)
				names = append(names, f.Properties.Name)
				if f.Geometry.Type != "MultiPolygon" || f.Properties.Area <= 0 {
					t.Errorf("%s: geometry %s, area %v", f.Properties.ID, f.Geometry.Type, f.Properties.Area)
				}
			}
			if fc.Type != "FeatureCollection" || strings.Join(ids, ",") != tc.ids || strings.Join(names, ",") != tc.names {
				t.Errorf("ids %v names %v", ids, names)
			}
		})
	}
	// To a file: a summary on stdout.
	path := filepath.Join(t.TempDir(), "units.geojson")
	out, _, err := execRoot(t, "--store", store, "units", "--units", "admin:8,within=Kent County", "--geojson", path)
	if err != nil || !strings.Contains(out, "7 units from admin:8 written to "+path) || !strings.Contains(out, "Dover") {
		t.Errorf("%v\n%s", err, out)
	}
}
