package proposal

import (
	"bytes"
	"context"
	"errors"
	"os"
	"testing"

	"github.com/loadwake/loadwake/audit/internal/worldtest"
	"github.com/loadwake/loadwake/rules"
)

// checkProposalError fails unless err is nil or a *ParseError naming file
// and unwrapping to ErrInvalid.
func checkProposalError(t testing.TB, err error, file string) {
	t.Helper()
	if err == nil {
		return
	}
	var pe *ParseError
	if !errors.As(err, &pe) || pe.File != file || !errors.Is(err, ErrInvalid) {
		t.Fatalf("error %q is not a *ParseError naming %s", err, file)
	}
}

// FuzzReadGeoJSONProposal feeds arbitrary bytes to ReadGeoJSON: a proposal
// or a *ParseError naming the file, never a panic. Seeded with the RFC 7946
// example (testdata of package spatial) and small hand-made features.
func FuzzReadGeoJSONProposal(f *testing.F) {
	data, err := os.ReadFile("../spatial/testdata/rfc7946_example.geojson")
	if err != nil {
		f.Fatal(err)
	}
	f.Add(data)
	f.Add([]byte(`{"type":"Feature","geometry":{"type":"MultiLineString","coordinates":[[[0,0],[1,1]]]},"properties":{"highway":"path","x":[1],"y":true}}`))
	f.Add([]byte("\xef\xbb\xbf{\"type\":\"FeatureCollection\",\"features\":[{\"type\":\"Feature\",\"geometry\":null}]}"))
	r := rules.Default()
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := ReadGeoJSON(context.Background(), "fuzz.geojson", bytes.NewReader(data), r, Options{MaxFeatures: 1000, MaxNodes: 10000})
		checkProposalError(t, err, "fuzz.geojson")
		if err == nil {
			p.Profile()
		}
	})
}

// FuzzReadOSMProposal feeds arbitrary bytes through XMLObjects into
// ReadOSM: a proposal or a positioned *ParseError, never a panic. Seeded
// with a JOSM-style file with negative ids and a multipolygon, an
// OsmChange delete block, and the osm module's real OsmChange (see
// TestReadOSMProposalOsmChange) cut to its first 3 kB.
func FuzzReadOSMProposal(f *testing.F) {
	f.Add([]byte(`<osm><node id="-1" lat="1" lon="2"/><node id="-2" lat="1" lon="3"/><node id="-3" lat="2" lon="3"/>` +
		`<way id="-4" action="modify"><nd ref="-1"/><nd ref="-2"/><nd ref="-3"/><nd ref="-1"/></way>` +
		`<relation id="-5"><member type="way" ref="-4" role="outer"/><tag k="type" v="multipolygon"/><tag k="building" v="yes"/></relation></osm>`))
	f.Add([]byte(`<osmChange><delete><node id="5" version="2" lat="1" lon="2"/></delete><create><node id="-1" lat="95" lon="2"/></create></osmChange>`))
	if data, err := os.ReadFile(worldtest.OSMFixture(f, "changeset_38162210.osc")); err == nil {
		f.Add(data[:min(len(data), 3000)])
	}
	r := rules.Default()
	f.Fuzz(func(t *testing.T, data []byte) {
		ctx := context.Background()
		p, err := ReadOSM(ctx, "fuzz.osm", XMLObjects(ctx, "fuzz.osm", bytes.NewReader(data)), r, Options{MaxFeatures: 1000, MaxNodes: 10000})
		if err != nil && !errors.Is(err, ErrInvalid) {
			t.Fatalf("error %q does not unwrap to ErrInvalid", err)
		}
		var pe *ParseError
		if err != nil && errors.As(err, &pe) && pe.File != "fuzz.osm" {
			t.Fatalf("error %q names %q", err, pe.File)
		}
		if err == nil {
			p.Profile()
		}
	})
}
