//go:build validate

package export_test

import (
	"context"
	"database/sql"
	"fmt"
	"path/filepath"
	"testing"
	"time"

	_ "github.com/duckdb/duckdb-go/v2"

	"github.com/loadwake/loadwake/audit/episode"
	"github.com/loadwake/loadwake/audit/panel"
	"github.com/loadwake/loadwake/audit/spatial"
	"github.com/loadwake/loadwake/audit/study"
	"github.com/loadwake/loadwake/layers"
	"github.com/loadwake/loadwake/layers/export"
	"github.com/loadwake/loadwake/rules"
)

// TestPanelSQLOnDuckDB runs PanelSQL on DuckDB (github.com/duckdb/duckdb-go,
// the engine as a library) over the events export of a small invented world
// and checks that every cell of loadwake's own panel (study.ForEpisode, all
// units not excluded) equals the engine's count. It needs the validate tag:
// building DuckDB takes minutes.
func TestPanelSQLOnDuckDB(t *testing.T) {
	ctx := context.Background()
	st := smallStore(t, 3)
	r := rules.Default()
	eps, err := episode.Detect(ctx, st, r, episode.Options{})
	if err != nil || len(eps) == 0 {
		t.Fatalf("detect: %v, %d episodes", err, len(eps))
	}
	stats, err := st.Stats(ctx)
	if err != nil {
		t.Fatal(err)
	}
	const zoom = 15
	units, err := spatial.Parse(fmt.Sprintf("tiles:%d", zoom), spatial.Options{Bound: stats.BBox})
	if err != nil {
		t.Fatal(err)
	}
	ep := &eps[0]
	window, err := study.ForEpisode(ctx, st, ep, eps, units, study.Options{})
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	if _, err := export.Events(ctx, st, dir, export.Options{Store: "t"}); err != nil {
		t.Fatal(err)
	}

	db, err := sql.Open("duckdb", "")
	if err != nil {
		t.Fatal(err)
	}
	defer db.Close()
	db.SetMaxOpenConns(1) // one in-memory database for every statement
	first := window.All.Start.Format("2006-01")
	last := window.All.Start.AddDate(0, window.All.Months-1, 0).Format("2006-01")
	setup := []string{
		fmt.Sprintf(`CREATE VIEW events AS SELECT * FROM read_parquet('%s', hive_partitioning = true, hive_types = {'month': VARCHAR})`,
			filepath.ToSlash(filepath.Join(dir, "month=*", "*.parquet"))),
		fmt.Sprintf(`CREATE TABLE params AS SELECT %d AS zoom, '%s' AS first_month, '%s' AS last_month`, zoom, first, last),
		`CREATE TABLE excluded_changesets (changeset BIGINT)`,
		`CREATE TABLE excluded_accounts (uid BIGINT)`,
	}
	for _, e := range eps { // the import's and every other import's changesets
		for _, c := range e.Changesets {
			setup = append(setup, fmt.Sprintf(`INSERT INTO excluded_changesets VALUES (%d)`, c))
		}
	}
	for _, a := range ep.Accounts {
		setup = append(setup, fmt.Sprintf(`INSERT INTO excluded_accounts VALUES (%d)`, a.UID))
	}
	for _, q := range setup {
		if _, err := db.ExecContext(ctx, q); err != nil {
			t.Fatalf("%s: %v", q, err)
		}
	}
	// DuckDB's own Parquet reader, independent of parquet-go, sees every event.
	var n, located, keys int64
	var idSum float64
	err = db.QueryRowContext(ctx, `SELECT count(*), count(lon), sum(len(keys)), sum(CAST(object_id AS DOUBLE)) FROM events WHERE store = 't'`).
		Scan(&n, &located, &keys, &idSum)
	if err != nil {
		t.Fatal(err)
	}
	var wn, wlocated, wkeys int64
	var wIDSum float64
	err = layers.ScanEvents(ctx, st, time.Time{}, time.Time{}, func(e *layers.Event) error {
		wn++
		if e.Located {
			wlocated++
		}
		wkeys += int64(len(e.Keys))
		wIDSum += float64(e.Object.Ref())
		return nil
	})
	if err != nil {
		t.Fatal(err)
	}
	if n != wn || located != wlocated || keys != wkeys || idSum != wIDSum {
		t.Errorf("DuckDB reads %d events, %d located, %d keys, id sum %g; store %d, %d, %d, %g",
			n, located, keys, idSum, wn, wlocated, wkeys, wIDSum)
	}

	for _, keep := range []bool{false, true} {
		t.Run(fmt.Sprintf("keep import accounts %v", keep), func(t *testing.T) {
			s, err := study.ForEpisode(ctx, st, ep, eps, units, study.Options{KeepImportAccounts: keep})
			if err != nil {
				t.Fatal(err)
			}
			if keep {
				if _, err := db.ExecContext(ctx, `DELETE FROM excluded_accounts`); err != nil {
					t.Fatal(err)
				}
			}
			comparePanel(t, db, s.All, zoom)
		})
	}
}

// comparePanel runs PanelSQL on db and compares every layer cell of p.
func comparePanel(t *testing.T, db *sql.DB, p *panel.Panel, zoom int) {
	t.Helper()
	ctx := context.Background()
	rows, err := db.QueryContext(ctx, export.PanelSQL)
	if err != nil {
		t.Fatal(err)
	}
	defer rows.Close()
	got := map[string]float64{}
	var total float64
	for rows.Next() {
		var x, y int64
		var month, layer string
		var n int64
		if err := rows.Scan(&x, &y, &month, &layer, &n); err != nil {
			t.Fatal(err)
		}
		got[fmt.Sprintf("%d/%d/%d %s %s", zoom, x, y, month, layer)] = float64(n)
	}
	if err := rows.Err(); err != nil {
		t.Fatal(err)
	}
	cells, nonzero := 0, 0
	for o, name := range p.Outcomes {
		if _, ok := layers.ParseLayer(name); !ok {
			continue // contributors and key families: not in the SQL
		}
		for u, unit := range p.Units {
			for m := range p.Months {
				key := fmt.Sprintf("%s %s %s", unit.ID, p.Start.AddDate(0, m, 0).Format("2006-01"), name)
				want := p.Y[o][u*p.Months+m]
				if got[key] != want {
					t.Errorf("%s: engine %g, loadwake %g", key, got[key], want)
				}
				cells++
				if want > 0 {
					nonzero++
				}
				total += want
			}
		}
	}
	if nonzero < 50 {
		t.Errorf("only %d non-zero cells of %d compared", nonzero, cells)
	}
	t.Logf("%d cells compared, %d non-zero, %g events", cells, nonzero, total)
}
