package export

import _ "embed"

// PanelSQL is the outcome panel as portable SQL over the events dataset:
// events per layer, slippy-map tile and month, by the counting rules of
// loadwake's own panel (audit/study). The relations it reads and how to run
// it on DuckDB, Spark SQL and Trino are in docs/export.md.
//
//go:embed panel.sql
var PanelSQL string
