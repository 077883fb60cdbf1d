-- The company's central store in PostgreSQL: every site's events, byte-exact, and the
-- reporting views over them. Applied by every shipper at connect; each statement is
-- idempotent, and the caller holds an advisory lock so concurrent shippers do not race.
CREATE SCHEMA IF NOT EXISTS turnbook;

-- Which text of this file the store was last brought up to (its SHA-256): a shipper that
-- finds its own text here runs none of this file, since some of it (CREATE INDEX IF NOT
-- EXISTS) locks the events table against every site's batches even when nothing changes.
CREATE TABLE IF NOT EXISTS turnbook.schema_applied (
    one boolean PRIMARY KEY DEFAULT true CHECK (one),
    digest text NOT NULL,
    applied_at timestamptz NOT NULL DEFAULT now()
);

CREATE TABLE IF NOT EXISTS turnbook.sites (
    site text PRIMARY KEY,
    time_zone text,
    first_shipped timestamptz NOT NULL DEFAULT now(),
    last_shipped timestamptz
);

-- The payload is kept as the exact text that was hashed; `body` is its jsonb reading for
-- queries (a NUL escape, which jsonb refuses, reads as U+FFFD there; the text keeps it).
CREATE TABLE IF NOT EXISTS turnbook.events (
    site text NOT NULL REFERENCES turnbook.sites (site),
    seq bigint NOT NULL CHECK (seq > 0),
    at text NOT NULL,
    actor text NOT NULL,
    kind text NOT NULL,
    subject text NOT NULL,
    payload text NOT NULL,
    prev_hash text NOT NULL,
    hash text NOT NULL,
    body jsonb GENERATED ALWAYS AS (replace(payload, '\u0000', '\ufffd')::jsonb) STORED,
    shipped_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (site, seq)
);

CREATE INDEX IF NOT EXISTS events_kind ON turnbook.events (kind, site);

-- The jsonb reading is compressed with lz4 rather than the default pglz: shipping spends
-- less of the server's time per event (measured, tests/benches/README.md). Changed only
-- once (the change locks the table); a server built without lz4 keeps pglz.
DO $$
BEGIN
    IF (SELECT attcompression FROM pg_attribute
        WHERE attrelid = 'turnbook.events'::regclass AND attname = 'body') <> 'l' THEN
        ALTER TABLE turnbook.events ALTER COLUMN body SET COMPRESSION lz4;
    END IF;
EXCEPTION WHEN feature_not_supported OR undefined_column THEN
    NULL;
END $$;

-- Every registration of a lot, from a lot sheet file or by a person.
CREATE OR REPLACE VIEW turnbook.lot_registrations AS
SELECT e.site, e.seq, e.at, r.value AS registration
FROM turnbook.events e, jsonb_array_elements(e.body -> 'lots') r
WHERE e.kind = 'file-ingested'
UNION ALL
SELECT e.site, e.seq, e.at, e.body -> 'lot'
FROM turnbook.events e
WHERE e.kind = 'lot-registered';

-- Every value stored for a batch: observed, conflicting or corrected (rows are arrays in
-- newer events and objects in older ones; a large export's rows come in `file-rows`
-- parts before its `file-ingested` event).
CREATE OR REPLACE VIEW turnbook.batch_values AS
SELECT e.site, e.seq, e.at,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 1 ELSE m ->> 'batch_id' END AS batch_id,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 2 ELSE m ->> 'quantity' END AS quantity,
       (CASE jsonb_typeof(m) WHEN 'array' THEN m -> 3 ELSE m -> 'value' END) AS value,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 4 ELSE m ->> 'text' END AS text,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 5 ELSE m ->> 'kind' END AS value_kind
FROM turnbook.events e, jsonb_array_elements(e.body -> 'measurements') m
WHERE e.kind = 'file-ingested' OR e.kind = 'file-rows'
UNION ALL
SELECT e.site, e.seq, e.at, e.body -> 'measurement' ->> 'batch_id',
       e.body -> 'measurement' ->> 'quantity', e.body -> 'measurement' -> 'value',
       e.body -> 'measurement' ->> 'text', 'correction'
FROM turnbook.events e
WHERE e.kind = 'correction';

-- One row per cycle (batch) of every site: its lot, cycle number, start, the latest value
-- of each measured quantity (corrections applied) and whether it is excluded from fits.
CREATE OR REPLACE VIEW turnbook.cycles AS
WITH latest AS (
    SELECT DISTINCT ON (site, batch_id, quantity) site, batch_id, quantity, value, text
    FROM turnbook.batch_values
    WHERE value_kind <> 'conflict'
    ORDER BY site, batch_id, quantity, seq DESC
), excluded AS (
    SELECT DISTINCT ON (site, body ->> 'batch_id') site, body ->> 'batch_id' AS batch_id,
           (body ->> 'excluded')::boolean AS excluded
    FROM turnbook.events
    WHERE kind = 'exclusion'
    ORDER BY site, body ->> 'batch_id', seq DESC
)
SELECT l.site, l.batch_id,
       max(l.text) FILTER (WHERE l.quantity = 'lot') AS lot,
       max(l.value #>> '{}') FILTER (WHERE l.quantity = 'cycle_no') AS cycle_no,
       max(l.text) FILTER (WHERE l.quantity = 'started_at') AS started_at,
       jsonb_object_agg(l.quantity, l.value)
           FILTER (WHERE jsonb_typeof(l.value) = 'number') AS measured,
       coalesce(bool_or(x.excluded), false) AS excluded
FROM latest l LEFT JOIN excluded x USING (site, batch_id)
GROUP BY l.site, l.batch_id;

-- The company's lots by site, with their latest registration, cycle count, newest cycle
-- and latest sign-off.
CREATE OR REPLACE VIEW turnbook.lots AS
WITH reg AS (
    SELECT DISTINCT ON (site, registration ->> 'lot') site, registration ->> 'lot' AS lot,
           registration, at AS registered_at
    FROM turnbook.lot_registrations
    ORDER BY site, registration ->> 'lot', seq DESC
), cyc AS (
    SELECT site, lot, count(*) AS cycles, count(*) FILTER (WHERE excluded) AS excluded_cycles,
           max(started_at) AS last_cycle_started
    FROM turnbook.cycles
    WHERE lot IS NOT NULL
    GROUP BY site, lot
), signed AS (
    SELECT DISTINCT ON (site, body ->> 'lot') site, body ->> 'lot' AS lot,
           body ->> 'meaning' AS last_sign_off, at AS last_sign_off_at
    FROM turnbook.events
    WHERE kind = 'sign-off'
    ORDER BY site, body ->> 'lot', seq DESC
)
SELECT coalesce(r.site, c.site) AS site, coalesce(r.lot, c.lot) AS lot,
       r.registration ->> 'catalyst' AS catalyst, r.registration ->> 'metal' AS metal,
       r.registration ->> 'family' AS family,
       (r.registration ->> 'loading_wt_pct')::float8 AS loading_wt_pct,
       (r.registration ->> 'charged_mass_g')::float8 AS charged_mass_g,
       r.registered_at, coalesce(c.cycles, 0) AS cycles,
       coalesce(c.excluded_cycles, 0) AS excluded_cycles, c.last_cycle_started,
       s.last_sign_off, s.last_sign_off_at
FROM reg r
FULL JOIN cyc c ON c.site = r.site AND c.lot = r.lot
LEFT JOIN signed s ON s.site = coalesce(r.site, c.site) AND s.lot = coalesce(r.lot, c.lot);

-- People's actions on alerts (acknowledged, closed) at every site.
CREATE OR REPLACE VIEW turnbook.alert_actions AS
SELECT site, seq, at, actor, body ->> 'alert_key' AS alert_key,
       (body ->> 'episode')::bigint AS episode, body ->> 'action' AS action,
       body ->> 'reason' AS reason
FROM turnbook.events
WHERE kind = 'alert-action';

-- Figures each site computes (TON, TOF, activity, fits, forecasts), shipped beside the
-- events. Derived and replaceable, not part of any chain: a site replaces a lot's rows
-- whenever it recomputes the lot (after_seq and computed_at say after which event and
-- when), so these rows are as current as the site's last shipping round, and `central
-- verify` does not check them. Columns as in the site's tables of the same names.
CREATE TABLE IF NOT EXISTS turnbook.lot_figures (
    site text NOT NULL REFERENCES turnbook.sites (site),
    lot text NOT NULL,
    state text NOT NULL,
    model text,
    latest_activity float8,
    cumulative_ton float8,
    forecast_status text,
    crossing_cycle float8,
    crossing_cycle_lower float8,
    crossing_cycle_upper float8,
    crossing_date text,
    crossing_date_early text,
    crossing_date_late text,
    order_by_date text,
    next_batch_verdict text,
    next_batch_activity float8,
    next_batch_activity_lower float8,
    abrupt_loss boolean NOT NULL,
    flags jsonb NOT NULL,
    attention jsonb NOT NULL,
    after_seq bigint NOT NULL,
    computed_at text NOT NULL,
    received_at timestamptz NOT NULL DEFAULT now(),
    PRIMARY KEY (site, lot)
);

CREATE TABLE IF NOT EXISTS turnbook.cycle_figures (
    site text NOT NULL REFERENCES turnbook.sites (site),
    batch_id text NOT NULL,
    lot text NOT NULL,
    cycle_no bigint NOT NULL,
    ton float8,
    ton_per_mol_metal_available float8,
    cumulative_ton float8,
    tof_average_per_h float8,
    tof_initial_per_h float8,
    k_app_per_h float8,
    k_app_se_per_h float8,
    activity float8,
    activity_se float8,
    activity_basis text NOT NULL,
    metal_charged_mmol float8,
    metal_available_mmol float8,
    catalyst_to_substrate_mol_per_mol float8,
    flags jsonb NOT NULL,
    after_seq bigint NOT NULL,
    computed_at text NOT NULL,
    PRIMARY KEY (site, batch_id)
);

CREATE INDEX IF NOT EXISTS cycle_figures_lot ON turnbook.cycle_figures (site, lot);

-- Every cycle of every site with its computed figures (NULL while the site has not
-- computed them, e.g. a lot nobody registered yet).
CREATE OR REPLACE VIEW turnbook.cycle_results AS
SELECT c.site, coalesce(f.lot, c.lot) AS lot,
       coalesce(f.cycle_no::text, c.cycle_no) AS cycle_no, c.batch_id, c.started_at,
       c.measured, c.excluded, f.ton, f.ton_per_mol_metal_available, f.cumulative_ton,
       f.tof_average_per_h, f.tof_initial_per_h, f.k_app_per_h, f.k_app_se_per_h,
       f.activity, f.activity_se, f.activity_basis, f.metal_charged_mmol,
       f.metal_available_mmol, f.catalyst_to_substrate_mol_per_mol, f.flags, f.after_seq,
       f.computed_at
FROM turnbook.cycles c
LEFT JOIN turnbook.cycle_figures f ON f.site = c.site AND f.batch_id = c.batch_id;

-- The company's lots by site with their latest state: pending (no registration shipped),
-- not-computed (no figures shipped yet), ok or attention, and the site's figures.
CREATE OR REPLACE VIEW turnbook.lot_results AS
SELECT l.site, l.lot, l.catalyst, l.metal, l.family, l.cycles, l.excluded_cycles,
       l.last_cycle_started,
       CASE WHEN l.registered_at IS NULL THEN 'pending'
            ELSE coalesce(f.state, 'not-computed') END AS state,
       f.model, f.latest_activity, f.cumulative_ton, f.forecast_status, f.crossing_cycle,
       f.crossing_cycle_lower, f.crossing_cycle_upper, f.crossing_date,
       f.crossing_date_early, f.crossing_date_late, f.order_by_date, f.next_batch_verdict,
       f.next_batch_activity, f.next_batch_activity_lower, f.abrupt_loss, f.flags,
       f.attention, l.last_sign_off, l.last_sign_off_at, f.after_seq, f.computed_at
FROM turnbook.lots l
LEFT JOIN turnbook.lot_figures f ON f.site = l.site AND f.lot = l.lot;

-- Every alert episode of every site: the latest message queued for it (rule, lot, state,
-- severity) and the latest action people took on it. Digests (messages with no alert
-- condition, hence no thread) are left out.
CREATE OR REPLACE VIEW turnbook.alerts AS
WITH queued AS (
    SELECT DISTINCT ON (site, body ->> 'alert_key', (body ->> 'episode')::bigint)
           site, body ->> 'alert_key' AS alert_key, (body ->> 'episode')::bigint AS episode,
           body ->> 'rule' AS rule, body ->> 'lot' AS lot, body ->> 'state' AS state,
           (body ->> 'severity')::bigint AS severity, body ->> 'queued_at' AS last_queued_at
    FROM turnbook.events
    WHERE kind = 'alert-queued' AND body ->> 'thread_message_id' IS NOT NULL
    ORDER BY site, body ->> 'alert_key', (body ->> 'episode')::bigint, seq DESC
), first_queued AS (
    SELECT site, body ->> 'alert_key' AS alert_key, (body ->> 'episode')::bigint AS episode,
           min(body ->> 'queued_at') AS first_queued_at
    FROM turnbook.events
    WHERE kind = 'alert-queued' AND body ->> 'thread_message_id' IS NOT NULL
    GROUP BY 1, 2, 3
), acted AS (
    SELECT DISTINCT ON (site, alert_key, episode) site, alert_key, episode, action,
           actor AS action_by, at AS action_at, reason AS action_reason
    FROM turnbook.alert_actions
    ORDER BY site, alert_key, episode, seq DESC
)
SELECT q.site, q.alert_key, q.episode, q.rule, q.lot, q.state, q.severity,
       f.first_queued_at, q.last_queued_at, a.action, a.action_by, a.action_at,
       a.action_reason
FROM queued q
JOIN first_queued f USING (site, alert_key, episode)
LEFT JOIN acted a USING (site, alert_key, episode);
