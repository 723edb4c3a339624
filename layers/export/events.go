package export

import (
	"context"
	"fmt"
	"time"

	"github.com/paulmach/osm"

	"github.com/loadwake/loadwake/layers"
)

// EventRow is one row of the events dataset (the schema in the package
// documentation).
type EventRow struct {
	Store          string    `parquet:"store,dict"`
	Time           time.Time `parquet:"time,timestamp(millisecond)"`
	Layer          string    `parquet:"layer,dict"`
	ObjectType     string    `parquet:"object_type,dict"`
	ObjectID       int64     `parquet:"object_id,delta"`
	Version        int32     `parquet:"version"`
	Changeset      int64     `parquet:"changeset,delta"`
	UID            int64     `parquet:"uid"`
	Class          *string   `parquet:"class,optional,dict"`
	GeometryChange *string   `parquet:"geometry_change,optional,dict"`
	Distance       *float64  `parquet:"distance_m,optional"`
	Lon            *float64  `parquet:"lon,optional"`
	Lat            *float64  `parquet:"lat,optional"`
	Keys           []KeyRow  `parquet:"keys,list"`
}

// KeyRow is one tag key an event touched.
type KeyRow struct {
	Key        string `parquet:"key,dict"`
	Family     string `parquet:"family,dict"`
	Change     string `parquet:"change,dict"`
	Provenance bool   `parquet:"provenance"`
}

// geometryChangeName names a geometry change in the export.
func geometryChangeName(g layers.GeometryChange) string {
	switch g {
	case layers.NodeMoved:
		return "node_moved"
	case layers.WayNodesChanged:
		return "way_nodes_changed"
	case layers.MembersChanged:
		return "members_changed"
	case layers.WayNodeMoved:
		return "way_node_moved"
	}
	return ""
}

// EventRowOf returns the row of event e for store.
func EventRowOf(store string, e *layers.Event) EventRow {
	r := EventRow{
		Store:      store,
		Time:       e.Time.UTC(),
		Layer:      e.Layer.String(),
		ObjectType: string(e.Object.Type()),
		ObjectID:   e.Object.Ref(),
		Version:    int32(e.Object.Version()),
		Changeset:  int64(e.Changeset),
		UID:        int64(e.UID),
	}
	if e.Class != "" {
		r.Class = ptr(e.Class)
	}
	if g := geometryChangeName(e.Geometry); g != "" {
		r.GeometryChange = ptr(g)
	}
	if e.Distance != 0 {
		r.Distance = ptr(e.Distance)
	}
	if e.Located {
		r.Lon, r.Lat = ptr(e.Location[0]), ptr(e.Location[1])
	}
	if len(e.Keys) > 0 {
		r.Keys = make([]KeyRow, len(e.Keys))
		for i, k := range e.Keys {
			r.Keys[i] = KeyRow{Key: k.Key, Family: k.Family, Change: k.Change.String(), Provenance: k.Provenance}
		}
	}
	return r
}

func ptr[T any](v T) *T { return &v }

// Month is the partition of a time: "YYYY-MM" in UTC.
func Month(t time.Time) string { return t.UTC().Format("2006-01") }

// Events writes every classified event of src into the dataset folder dir
// (layout and schema in the package documentation) and returns its
// manifest. Events come in time order, so one file is open at a time.
// ctx is checked for every event; a cancelled or failed export removes its
// temporary files and leaves the folder's complete files of earlier exports
// as they were.
func Events(ctx context.Context, src layers.DerivedReader, dir string, opts Options) (Manifest, error) {
	if _, err := layers.Summarize(ctx, src); err != nil {
		return Manifest{}, fmt.Errorf("export events: %w", err)
	}
	d, err := newDataset[EventRow](dir, "events", opts)
	if err != nil {
		return Manifest{}, err
	}
	err = layers.ScanEvents(ctx, src, time.Time{}, time.Time{}, func(e *layers.Event) error {
		if err := ctx.Err(); err != nil {
			return err
		}
		return d.write(Month(e.Time), EventRowOf(opts.Store, e))
	})
	if err != nil {
		d.abort()
		return Manifest{}, fmt.Errorf("export events to %s: %w", dir, err)
	}
	return d.commit()
}

// ChangesetSource is what Changesets reads; *ingest.Store meets it.
type ChangesetSource interface {
	// ScanChangesets calls fn for every stored changeset record.
	ScanChangesets(ctx context.Context, fn func(c *osm.Changeset) error) error
}
