-- The company's central store in PostgreSQL: every site's events, byte-exact, and the
-- reporting views over them. Applied by every shipper at connect; each statement is
-- idempotent, and the caller holds an advisory lock so concurrent shippers do not race.
CREATE SCHEMA IF NOT EXISTS turnbook;

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
-- newer events and objects in older ones).
CREATE OR REPLACE VIEW turnbook.batch_values AS
SELECT e.site, e.seq, e.at,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 1 ELSE m ->> 'batch_id' END AS batch_id,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 2 ELSE m ->> 'quantity' END AS quantity,
       (CASE jsonb_typeof(m) WHEN 'array' THEN m -> 3 ELSE m -> 'value' END) AS value,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 4 ELSE m ->> 'text' END AS text,
       CASE jsonb_typeof(m) WHEN 'array' THEN m ->> 5 ELSE m ->> 'kind' END AS value_kind
FROM turnbook.events e, jsonb_array_elements(e.body -> 'measurements') m
WHERE e.kind = 'file-ingested'
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
