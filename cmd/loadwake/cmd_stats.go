package main

import (
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"path/filepath"
	"text/tabwriter"
	"time"

	"github.com/dustin/go-humanize"
	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers"
	"github.com/spf13/cobra"
)

// statsOptions holds the flags of `loadwake stats`.
type statsOptions struct {
	json string
}

func newStatsCommand(g *cli.Globals) *cobra.Command {
	var o statsOptions
	cmd := &cobra.Command{
		Use:   "stats",
		Short: "Print what the store holds",
		Long: `stats prints the store's totals: objects and versions by type, deleted
versions, changesets, users, the time range of the edits, the bounding box of
the nodes and the files ingested. --json FILE writes the same as one JSON
object (bbox as [west, south, east, north], as in GeoJSON, RFC 7946); with
--json - the JSON goes to stdout and the table to stderr.`,
		Args: cli.NoArgs,
		RunE: func(cmd *cobra.Command, _ []string) error {
			return runStats(cmd, g, &o)
		},
	}
	cli.AddFileFlag(cmd.Flags(), &o.json, "json", "the totals as JSON")
	return cmd
}

// statsJSON is the shape of `loadwake stats --json`.
type statsJSON struct {
	Store            string              `json:"store"`
	Schema           int                 `json:"schema"`
	Nodes            int64               `json:"nodes"`
	Ways             int64               `json:"ways"`
	Relations        int64               `json:"relations"`
	NodeVersions     int64               `json:"node_versions"`
	WayVersions      int64               `json:"way_versions"`
	RelationVersions int64               `json:"relation_versions"`
	Versions         int64               `json:"versions"`
	DeletedVersions  int64               `json:"deleted_versions"`
	Changesets       int64               `json:"changesets"`
	Users            int64               `json:"users"`
	FirstEdit        *time.Time          `json:"first_edit"`
	LastEdit         *time.Time          `json:"last_edit"`
	BBox             []float64           `json:"bbox"`
	Files            []ingest.FileRecord `json:"files"`
	Layers           *layers.Summary     `json:"classification"` // null before classification
}

func runStats(cmd *cobra.Command, g *cli.Globals, o *statsOptions) error {
	s, err := cli.OpenStore(g)
	if err != nil {
		return err
	}
	m, err := s.Meta(cmd.Context())
	var sum *layers.Summary
	if err == nil {
		ls, serr := layers.Summarize(cmd.Context(), s)
		switch {
		case serr == nil:
			sum = &ls
		case !errors.Is(serr, layers.ErrNotClassified):
			err = serr
		}
	}
	if cerr := s.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return err
	}
	outs, err := cli.NewOutputs(cmd, o.json)
	if err != nil {
		return err
	}
	out := outs.Text
	printStats(out, g.Store, m)
	if sum == nil {
		fmt.Fprintln(out, "not classified yet: run loadwake classify")
	} else if err := layers.WriteSummary(out, *sum); err != nil {
		return err
	}
	return outs.Write(o.json, func(w io.Writer) error { return printStatsJSON(w, g.Store, m, sum) })
}

func printStatsJSON(w io.Writer, store string, m ingest.Meta, sum *layers.Summary) error {
	t := m.Totals
	v := statsJSON{Store: store, Schema: m.Schema, Nodes: t.Nodes, Ways: t.Ways, Relations: t.Relations,
		NodeVersions: t.NodeVersions, WayVersions: t.WayVersions, RelationVersions: t.RelationVersions,
		Versions: t.Versions(), DeletedVersions: t.DeletedVersions, Changesets: t.Changesets, Users: t.Users,
		Files: m.Files, Layers: sum}
	if v.Files == nil {
		v.Files = []ingest.FileRecord{}
	}
	if !t.FirstEdit.IsZero() {
		v.FirstEdit, v.LastEdit = &t.FirstEdit, &t.LastEdit
	}
	if t.HasBBox {
		v.BBox = []float64{t.BBox.Min.Lon(), t.BBox.Min.Lat(), t.BBox.Max.Lon(), t.BBox.Max.Lat()}
	}
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

func printStats(w io.Writer, store string, m ingest.Meta) {
	t := m.Totals
	c := humanize.Comma
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintf(tw, "store\t%s (schema %d)\n", store, m.Schema)
	fmt.Fprintf(tw, "\tobjects\tversions\n")
	fmt.Fprintf(tw, "nodes\t%s\t%s\n", c(t.Nodes), c(t.NodeVersions))
	fmt.Fprintf(tw, "ways\t%s\t%s\n", c(t.Ways), c(t.WayVersions))
	fmt.Fprintf(tw, "relations\t%s\t%s\n", c(t.Relations), c(t.RelationVersions))
	fmt.Fprintf(tw, "all\t%s\t%s\n", c(t.Nodes+t.Ways+t.Relations), c(t.Versions()))
	fmt.Fprintf(tw, "deleted versions\t%s\n", c(t.DeletedVersions))
	fmt.Fprintf(tw, "changesets\t%s\n", c(t.Changesets))
	fmt.Fprintf(tw, "users\t%s\n", c(t.Users))
	if t.FirstEdit.IsZero() {
		fmt.Fprintf(tw, "time range\t-\n")
	} else {
		fmt.Fprintf(tw, "time range\t%s .. %s\n", t.FirstEdit.Format(time.RFC3339), t.LastEdit.Format(time.RFC3339))
	}
	if t.HasBBox {
		fmt.Fprintf(tw, "bbox\t%.7f,%.7f .. %.7f,%.7f (west,south .. east,north)\n",
			t.BBox.Min.Lon(), t.BBox.Min.Lat(), t.BBox.Max.Lon(), t.BBox.Max.Lat())
	} else {
		fmt.Fprintf(tw, "bbox\t-\n")
	}
	fmt.Fprintf(tw, "files\t%d\n", len(m.Files))
	tw.Flush()
	for _, f := range m.Files {
		fmt.Fprintf(w, "  %s  %s  %s  %s  %s new versions, %s new changesets, %s conflicts  sha256 %.12s\n",
			f.Completed.Format("2006-01-02 15:04"), filepath.Base(f.Path), f.Format, humanize.Bytes(uint64(f.Size)),
			c(f.Versions), c(f.Changesets), c(f.Conflicts), f.SHA256)
	}
}
