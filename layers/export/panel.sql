-- The outcome panel over an exported events dataset: events of each layer per
-- slippy-map tile (tiles:Z units) and month, counted by the rules of loadwake's
-- own panel (audit/study): located events only; months from first_month to
-- last_month; no bookkeeping events; no event of the import's changesets, of
-- any other detected import's changesets (excluded_changesets) or, unless kept,
-- of the import's accounts (excluded_accounts). Tile numbers follow the OSM
-- slippy-map tile-naming formulas; the unit id is zoom/tile_x/tile_y.
--
-- The query reads four relations the caller defines (see docs/export.md):
--   events               the exported events (month as a string 'YYYY-MM')
--   params               one row: zoom INTEGER, first_month, last_month STRING
--   excluded_changesets  changeset BIGINT
--   excluded_accounts    uid BIGINT
-- It keeps to SQL that DuckDB, Spark SQL and Trino share: CTEs, LEAST,
-- GREATEST, FLOOR, POWER, LN, SIN, PI, CAST, NOT EXISTS, GROUP BY.
WITH located AS (
  SELECT
    e.month,
    e.layer,
    e.changeset,
    e.uid,
    LEAST(GREATEST(FLOOR((e.lon / 360.0 + 0.5) * POWER(2, p.zoom)), 0), POWER(2, p.zoom) - 1) AS tile_x,
    LEAST(GREATEST(FLOOR((0.5 + 0.5 * LN((1 + SIN(e.lat * PI() / 180.0)) / (1 - SIN(e.lat * PI() / 180.0))) / (-2 * PI()))
      * POWER(2, p.zoom)), 0), POWER(2, p.zoom) - 1) AS tile_y
  FROM events e
  CROSS JOIN params p
  WHERE e.lon IS NOT NULL
    AND e.lat IS NOT NULL
    AND e.lon BETWEEN -180 AND 180
    AND e.lat BETWEEN -85.0511287798066 AND 85.0511287798066
    AND e.month BETWEEN p.first_month AND p.last_month
    AND e.layer <> 'bookkeeping'
)
SELECT
  CAST(l.tile_x AS BIGINT) AS tile_x,
  CAST(l.tile_y AS BIGINT) AS tile_y,
  l.month,
  l.layer,
  COUNT(*) AS events
FROM located l
WHERE NOT EXISTS (SELECT 1 FROM excluded_changesets x WHERE x.changeset = l.changeset)
  AND NOT EXISTS (SELECT 1 FROM excluded_accounts a WHERE a.uid = l.uid)
GROUP BY CAST(l.tile_x AS BIGINT), CAST(l.tile_y AS BIGINT), l.month, l.layer
ORDER BY tile_x, tile_y, l.month, l.layer
