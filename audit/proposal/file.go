package proposal

import (
	"context"
	"fmt"
	"iter"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/ingest/osmfile"
	"github.com/loadwake/loadwake/rules"
)

// ReadFile reads the proposal in path, whatever its form: OSM XML or
// OsmChange (versions not needed; the editors' files are read with
// XMLObjects), PBF through ingest's reader, or GeoJSON with tags as
// properties; plain, gzip or bzip2. The form and the compression are told
// from the content (osmfile.OpenContent), not the name. A changeset metadata
// file is refused. Errors name the file and, for bad content, the position;
// on such an error the returned Proposal, when not nil, holds the features
// read before it.
func ReadFile(ctx context.Context, path string, r *rules.RuleSet, opts Options) (*Proposal, error) {
	c, err := osmfile.OpenContent(path)
	if err != nil {
		return nil, err
	}
	defer c.Close()
	switch c.Format {
	case osmfile.FormatChangesets:
		return nil, fmt.Errorf("%s: changeset metadata, not a proposal of map data", path)
	case osmfile.FormatPBF:
		rd, err := osmfile.OpenFile(ctx, path, osmfile.ReadOptions{})
		if err != nil {
			return nil, err
		}
		defer rd.Close()
		return ReadOSM(ctx, path, readerObjects(rd), r, opts)
	case osmfile.FormatXML, osmfile.FormatOsmChange:
		// Editors' files have no versions: read them with the proposal reader.
		return ReadOSM(ctx, path, XMLObjects(ctx, path, c), r, opts)
	}
	return ReadGeoJSON(ctx, path, c, r, opts)
}

// readerObjects turns an ingest reader into the object sequence ReadOSM
// reads; the reader's error (a *osmfile.ParseError naming file and position)
// ends it.
func readerObjects(rd osmfile.Reader) iter.Seq2[osm.Object, error] {
	return func(yield func(osm.Object, error) bool) {
		for rd.Scan() {
			if it := rd.Item(); it.Object != nil && !yield(it.Object, nil) {
				return
			}
		}
		if err := rd.Err(); err != nil {
			yield(nil, err)
		}
	}
}
