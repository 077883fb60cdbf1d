-- 0014: a database any SQLite from 3.37 on reads, checks, dumps and restores, and the
-- computed figures in SQL.
--
-- 1. The unique index that makes a second ingestion of one content impossible was built
--    on `unhex(sha256)` (0005), a function SQLite has only since 3.41: an older sqlite3
--    (Debian 12 ships 3.40) could then not run `PRAGMA integrity_check`, update the
--    table or restore a `.dump`. The same guarantee on the hex text itself, compared
--    without regard to case as `unhex` did, needs no function.
DROP INDEX source_files_ingested_once;
CREATE UNIQUE INDEX source_files_ingested_once ON source_files(sha256 COLLATE NOCASE)
    WHERE outcome = 'ingested';

-- 2. Figures the application computes (chemistry and fits), stored at each recompute of a
--    lot so SQL readers (the sqlite3 shell, pandas, a report tool) get the same numbers
--    as `turnbook cycles` and `turnbook lots` without re-implementing them. Derived data,
--    like `fits`: outside the audit chain, replaced whole at each recompute of the lot.
CREATE TABLE cycle_figures (
    batch_id                         TEXT    PRIMARY KEY,
    lot                              TEXT    NOT NULL,
    cycle_no                         INTEGER NOT NULL,
    ton                              REAL,   -- per mol metal charged
    ton_per_mol_metal_available      REAL,
    cumulative_ton                   REAL,
    tof_average_per_h                REAL,
    tof_initial_per_h                REAL,
    k_app_per_h                      REAL,
    k_app_se_per_h                   REAL,
    activity                         REAL,   -- relative to the reference cycle
    activity_se                      REAL,
    activity_basis                   TEXT    NOT NULL,
    metal_charged_mmol               REAL,
    metal_available_mmol             REAL,
    catalyst_to_substrate_mol_per_mol REAL,
    flags                            TEXT    NOT NULL,  -- JSON array of words
    after_seq                        INTEGER NOT NULL,
    computed_at                      TEXT    NOT NULL
) STRICT, WITHOUT ROWID;
CREATE INDEX cycle_figures_lot ON cycle_figures(lot, cycle_no);

CREATE TABLE lot_figures (
    lot                        TEXT    PRIMARY KEY,
    state                      TEXT    NOT NULL
                               CHECK (state = 'ok' OR state = 'attention'),
    model                      TEXT,
    latest_activity            REAL,
    cumulative_ton             REAL,
    forecast_status            TEXT,
    crossing_cycle             REAL,
    crossing_cycle_lower       REAL,
    crossing_cycle_upper       REAL,
    crossing_date              TEXT,
    crossing_date_early        TEXT,
    crossing_date_late         TEXT,
    order_by_date              TEXT,
    next_batch_verdict         TEXT,
    next_batch_activity        REAL,
    next_batch_activity_lower  REAL,
    abrupt_loss                INTEGER NOT NULL CHECK (abrupt_loss = 0 OR abrupt_loss = 1),
    flags                      TEXT    NOT NULL,  -- JSON array of words
    attention                  TEXT    NOT NULL,  -- JSON array of sentences
    after_seq                  INTEGER NOT NULL,
    computed_at                TEXT    NOT NULL
) STRICT, WITHOUT ROWID;

-- The views SQL readers use, in the column names of `turnbook export` and `cycles`
-- (units in the names; conversion, selectivity and yield are fractions 0-1; ton is mol
-- product per mol metal). Every cycle of `cycles` appears, with NULL figures while its lot
-- is pending (nobody registered it) or not yet recomputed since this migration.
CREATE VIEW cycle_results AS
SELECT c.lot                                AS lot,
       COALESCE(f.cycle_no, c.cycle_no)     AS cycle,
       c.batch_id                           AS batch_id,
       c.started_at                         AS started_at,
       c.duration_s / 3600.0                AS duration_h,
       c.temperature_k - 273.15             AS temperature_c,
       c.substrate_mol                      AS substrate_mol,
       f.metal_charged_mmol                 AS metal_charged_mmol,
       f.metal_available_mmol               AS metal_available_mmol,
       f.catalyst_to_substrate_mol_per_mol  AS catalyst_to_substrate,
       c.conversion                         AS conversion,
       c.selectivity                        AS selectivity,
       c.product_mass_g                     AS product_mass_g,
       c.metal_in_product_ug_g              AS metal_in_product_ug_g,
       c.catalyst_recovered_g               AS catalyst_recovered_g,
       f.ton                                AS ton,
       f.ton_per_mol_metal_available        AS ton_per_metal_available,
       f.tof_average_per_h                  AS tof_average_per_h,
       f.tof_initial_per_h                  AS tof_initial_per_h,
       f.cumulative_ton                     AS cumulative_ton,
       f.k_app_per_h                        AS k_app_per_h,
       f.k_app_se_per_h                     AS k_app_se_per_h,
       f.activity                           AS activity,
       f.activity_se                        AS activity_se,
       f.activity_basis                     AS activity_basis,
       c.excluded                           AS excluded,
       c.conflicts                          AS conflicts,
       CASE WHEN f.flags IS NOT NULL THEN f.flags
            WHEN l.lot IS NOT NULL THEN '[]'
            -- A pending lot's cycles carry the record flags and `pending`, as `cycles`.
            WHEN c.conflicts > 0 AND c.excluded THEN '["conflict","excluded","pending"]'
            WHEN c.conflicts > 0 THEN '["conflict","pending"]'
            WHEN c.excluded THEN '["excluded","pending"]'
            ELSE '["pending"]' END          AS flags_json,
       f.computed_at                        AS computed_at
FROM cycles c LEFT JOIN cycle_figures f ON f.batch_id = c.batch_id
     LEFT JOIN lots l ON l.lot = c.lot;

-- One row per lot (registered, or named by a cycle); state: pending (nobody registered
-- it), attention (`lots` lists something to look at), ok, or not-computed (not yet
-- recomputed since this migration). Dates are the plant's local dates (YYYY-MM-DD).
CREATE VIEW lot_results AS
WITH names AS (SELECT lot FROM lots UNION SELECT lot FROM cycles WHERE lot IS NOT NULL)
SELECT n.lot                               AS lot,
       l.catalyst                          AS catalyst,
       l.metal                             AS metal,
       l.site                              AS site,
       CASE WHEN l.lot IS NULL THEN 'pending' ELSE COALESCE(f.state, 'not-computed') END
                                           AS state,
       (SELECT count(*) FROM cycles c WHERE c.lot = n.lot) AS cycles,
       f.model                             AS model,
       f.latest_activity                   AS latest_activity,
       f.cumulative_ton                    AS cumulative_ton,
       f.forecast_status                   AS forecast_status,
       f.crossing_cycle                    AS crossing_cycle,
       f.crossing_cycle_lower              AS crossing_cycle_lower,
       f.crossing_cycle_upper              AS crossing_cycle_upper,
       f.crossing_date                     AS crossing_date,
       f.crossing_date_early               AS crossing_date_early,
       f.crossing_date_late                AS crossing_date_late,
       f.order_by_date                     AS order_by_date,
       f.next_batch_verdict                AS next_batch_verdict,
       f.next_batch_activity               AS next_batch_activity,
       f.next_batch_activity_lower         AS next_batch_activity_lower,
       f.abrupt_loss                       AS abrupt_loss,
       COALESCE(f.flags, '[]')             AS flags_json,
       COALESCE(f.attention, '[]')         AS attention_json,
       f.computed_at                       AS computed_at
FROM names n LEFT JOIN lots l ON l.lot = n.lot LEFT JOIN lot_figures f ON f.lot = n.lot;
