package main

import (
	"context"
	"fmt"
	"path/filepath"
	"regexp"
	"time"

	"github.com/loadwake/loadwake/cmd/loadwake/internal/cli"
	"github.com/loadwake/loadwake/ingest"
	"github.com/loadwake/loadwake/layers/export"
	"github.com/spf13/cobra"
)

// exportOptions holds the flags of `loadwake export events|changesets`.
type exportOptions struct {
	out         string // dataset folder
	storeID     string // store id in rows and file names; "" means from the store's folder name
	rowsPerFile int64
}

func newExportCommand(g *cli.Globals) *cobra.Command {
	var o exportOptions
	cmd := &cobra.Command{
		Use:   "export",
		Short: "Write classified events or changesets as Parquet files for other engines",
		Long: `export writes the store's classified events (export events) or its changeset
records (export changesets) as Apache Parquet files, partitioned by month in
the Hive layout that DuckDB, Spark SQL and Trino read:

  OUT/month=YYYY-MM/part-STORE-NNNNN.parquet

Every row and file name carries the store id (--store-id; by default the
store folder's name), so stores of several regions can export into one
folder. An export replaces only its own store's files; it writes under
temporary names, renames them when all are complete and writes
OUT/_loadwake-STORE.json last, so a folder without that file holds an
incomplete export. The columns are listed in docs/export.md.

The files hold OpenStreetMap data (© OpenStreetMap contributors, ODbL): keep
the licence's attribution and share-alike terms when you share them.`,
	}
	f := cmd.PersistentFlags()
	f.StringVar(&o.out, "out", "", "dataset folder to write into (required)")
	f.StringVar(&o.storeID, "store-id", "", "store id in rows and file names: letters, digits, '_' and '.' (default: the store folder's name)")
	f.Int64Var(&o.rowsPerFile, "rows-per-file", 1_000_000, "rows per Parquet file before a month starts a new one")
	run := func(kind string) func(*cobra.Command, []string) error {
		return func(cmd *cobra.Command, _ []string) error { return runExport(cmd, g, &o, kind) }
	}
	cmd.AddCommand(
		&cobra.Command{Use: "events", Short: "Write the classified events (run classify first)", Args: cli.NoArgs, RunE: run("events")},
		&cobra.Command{Use: "changesets", Short: "Write the changeset records", Args: cli.NoArgs, RunE: run("changesets")},
	)
	return cmd
}

// nonIDChars are the characters a folder name may hold that a store id may not.
var nonIDChars = regexp.MustCompile(`[^A-Za-z0-9_.]+`)

func runExport(cmd *cobra.Command, g *cli.Globals, o *exportOptions, kind string) error {
	if o.out == "" {
		return cli.Usagef("export %s: --out is required", kind)
	}
	if o.rowsPerFile <= 0 {
		return cli.Usagef("export %s: --rows-per-file must be positive", kind)
	}
	id := o.storeID
	if id == "" {
		abs, err := filepath.Abs(g.Store)
		if err != nil {
			return err
		}
		id = nonIDChars.ReplaceAllString(filepath.Base(abs), "_")
	}
	st, err := cli.OpenStore(g)
	if err != nil {
		return err
	}
	start := time.Now()
	m, err := exportStore(cmd.Context(), st, kind, o.out, export.Options{Store: id, RowsPerFile: o.rowsPerFile})
	if cerr := st.Close(); err == nil {
		err = cerr
	}
	if err != nil {
		return err
	}
	secs := time.Since(start).Seconds()
	fmt.Fprintf(cmd.OutOrStdout(), "exported %d %s of store %s into %d files under %s (%.1f s, %.0f rows/s)\n",
		m.Rows, kind, m.Store, len(m.Files), o.out, secs, float64(m.Rows)/max(secs, 1e-9))
	return nil
}

func exportStore(ctx context.Context, st *ingest.Store, kind, out string, opts export.Options) (export.Manifest, error) {
	if kind == "events" {
		return export.Events(ctx, st, out, opts)
	}
	return export.Changesets(ctx, st, out, opts)
}
