package export

import (
	"context"
	"fmt"
	"time"

	"github.com/paulmach/osm"
)

// ChangesetRow is one row of the changesets dataset (the schema in the
// package documentation).
type ChangesetRow struct {
	Store      string            `parquet:"store,dict"`
	ID         int64             `parquet:"id,delta"`
	CreatedAt  *time.Time        `parquet:"created_at,optional,timestamp(millisecond)"`
	ClosedAt   *time.Time        `parquet:"closed_at,optional,timestamp(millisecond)"`
	Open       bool              `parquet:"open"`
	UID        int64             `parquet:"uid"`
	User       string            `parquet:"user,dict"`
	NumChanges int32             `parquet:"num_changes"`
	MinLon     *float64          `parquet:"min_lon,optional"`
	MinLat     *float64          `parquet:"min_lat,optional"`
	MaxLon     *float64          `parquet:"max_lon,optional"`
	MaxLat     *float64          `parquet:"max_lat,optional"`
	Tags       map[string]string `parquet:"tags"`
}

// unknownMonth is the partition of changesets without an opening time.
const unknownMonth = "unknown"

// ChangesetRowOf returns the row of changeset c for store, and its month.
func ChangesetRowOf(store string, c *osm.Changeset) (ChangesetRow, string) {
	r := ChangesetRow{
		Store: store, ID: int64(c.ID), Open: c.Open, UID: int64(c.UserID), User: c.User,
		NumChanges: int32(c.ChangesCount),
	}
	month := unknownMonth
	if !c.CreatedAt.IsZero() {
		r.CreatedAt = ptr(c.CreatedAt.UTC())
		month = Month(c.CreatedAt)
	}
	if !c.ClosedAt.IsZero() {
		r.ClosedAt = ptr(c.ClosedAt.UTC())
	}
	if c.MinLat != 0 || c.MaxLat != 0 || c.MinLon != 0 || c.MaxLon != 0 {
		r.MinLon, r.MinLat, r.MaxLon, r.MaxLat = ptr(c.MinLon), ptr(c.MinLat), ptr(c.MaxLon), ptr(c.MaxLat)
	}
	if len(c.Tags) > 0 {
		r.Tags = c.Tags.Map()
	}
	return r, month
}

// Changesets writes every changeset record of src into the dataset folder
// dir, partitioned by the month each was opened (layout and schema in the
// package documentation), and returns the manifest. Records come in id
// order, which is nearly time order; at most Options.MaxOpen month files are
// open at once, and a month met again after its file was closed gets a new
// file. ctx is checked for every record; a cancelled or failed export removes
// its temporary files.
func Changesets(ctx context.Context, src ChangesetSource, dir string, opts Options) (Manifest, error) {
	d, err := newDataset[ChangesetRow](dir, "changesets", opts)
	if err != nil {
		return Manifest{}, err
	}
	err = src.ScanChangesets(ctx, func(c *osm.Changeset) error {
		if err := ctx.Err(); err != nil {
			return err
		}
		row, month := ChangesetRowOf(opts.Store, c)
		return d.write(month, row)
	})
	if err != nil {
		d.abort()
		return Manifest{}, fmt.Errorf("export changesets to %s: %w", dir, err)
	}
	return d.commit()
}
