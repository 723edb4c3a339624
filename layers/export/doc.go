// Package export writes a store's classified events and its changesets as
// Apache Parquet files, Hive-partitioned by month, so that an engine outside
// loadwake (DuckDB, Spark SQL, Trino) can read them:
//
//	DIR/month=YYYY-MM/part-STORE-NNNNN.parquet
//
// Events reads the events the classification pass stored (layers.ScanEvents,
// in time order); Changesets reads the changeset records. Each row carries
// the store's id (Options.Store) in the column store, and every file name
// carries it too, so the exports of several stores (one per region, made on
// different machines) go into one dataset without clashing: object ids,
// versions and changeset ids repeat between overlapping extracts, the pair
// (store, key) does not. An export replaces only its own store's files.
//
// # Completeness
//
// Files are written under hidden temporary names (".part-...parquet.tmp",
// which readers globbing *.parquet skip) and renamed when every file is
// closed; then the store's files of an earlier export that the new one did
// not write are removed, and last the manifest _loadwake-STORE.json is
// written (the files, their rows, the time). A failed or cancelled export
// removes its temporary files and leaves no manifest: a dataset whose
// manifest is missing is incomplete.
//
// # Schemas
//
// One events row per layers.Event (its counting rules hold), keyed by
// (store, object_type, object_id, version, layer); one changesets row per
// changeset record, keyed by (store, id). The columns, their Parquet types
// and meanings are tabled in docs/export.md; EventRow and ChangesetRow are
// the same schemas as Go types.
//
// Exported data are OpenStreetMap data (© OpenStreetMap contributors,
// ODbL): whoever shares them keeps the licence's attribution and share-alike
// terms.
package export
