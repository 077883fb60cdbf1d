-- 0005: leaner records, one provenance row per file line instead of one row per value.
--
-- Every value a file or a person wrote already lives in the payload of its event, which
-- the audit chain covers. The `measurements` table held a second copy of each, one row per
-- value with an index entry each: six rows and six index entries for a one-line export, the
-- largest part of a backfill's work. From here on the event payloads are the record of
-- values and `measurements` is a view over them, with the same columns as the old table,
-- for QA staff and their SQL. What the store keeps per value is only what lookups need:
-- which events wrote values of a batch, from which file and line (`batch_sources`).

-- Which events wrote values of a batch: one row per batch, event and file line.
-- `line` is 0 for a value a person entered (a correction), which has no file line.
CREATE TABLE batch_sources (
    batch_id       TEXT    NOT NULL,
    event_seq      INTEGER NOT NULL REFERENCES events(seq),
    line           INTEGER NOT NULL CHECK (line >= 0),
    source_file_id INTEGER REFERENCES source_files(id),
    PRIMARY KEY (batch_id, event_seq, line)
) STRICT, WITHOUT ROWID;

INSERT INTO batch_sources(batch_id, event_seq, line, source_file_id)
    SELECT batch_id, event_seq, COALESCE(line, 0), MIN(source_file_id)
    FROM measurements GROUP BY batch_id, event_seq, COALESCE(line, 0);

-- The next free id of a kind of record that has no table of its own to count from.
CREATE TABLE id_counters (
    name TEXT PRIMARY KEY,
    next INTEGER NOT NULL CHECK (next >= 1)
) STRICT;
INSERT INTO id_counters(name, next)
    SELECT 'measurement', COALESCE(MAX(id), 0) + 1 FROM measurements;

-- The rows were copies of what the event payloads hold (`verify` proved them equal).
DROP TRIGGER measurements_append_only;
DROP INDEX measurements_batch_seq;
DROP TABLE measurements;

-- The values as rows, read from the events that wrote them (a scan of the event log: for
-- people and reports, not for the hot path). A file's rows are stored as arrays in this
-- column order (events from before 0005 hold them as objects); a correction holds one
-- row as an object.
CREATE VIEW measurements AS
    SELECT
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[0]')
                ELSE json_extract(m.value, '$.id') END AS id,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[1]')
                ELSE json_extract(m.value, '$.batch_id') END AS batch_id,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[2]')
                ELSE json_extract(m.value, '$.quantity') END AS quantity,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[3]')
                ELSE json_extract(m.value, '$.value') END AS value,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[4]')
                ELSE json_extract(m.value, '$.text') END AS text,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[5]')
                ELSE json_extract(m.value, '$.kind') END AS kind,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[6]')
                ELSE json_extract(m.value, '$.source_file_id') END AS source_file_id,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[7]')
                ELSE json_extract(m.value, '$.line') END AS line,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[8]')
                ELSE json_extract(m.value, '$.col') END AS col,
           CASE m.type WHEN 'array' THEN json_extract(m.value, '$[9]')
                ELSE json_extract(m.value, '$.raw') END AS raw,
           e.seq AS event_seq
    FROM events e, json_each(e.payload, '$.measurements') m
    WHERE e.kind = 'file-ingested'
    UNION ALL
    SELECT json_extract(e.payload, '$.measurement.id'),
           json_extract(e.payload, '$.measurement.batch_id'),
           json_extract(e.payload, '$.measurement.quantity'),
           json_extract(e.payload, '$.measurement.value'),
           json_extract(e.payload, '$.measurement.text'),
           json_extract(e.payload, '$.measurement.kind'),
           json_extract(e.payload, '$.measurement.source_file_id'),
           json_extract(e.payload, '$.measurement.line'),
           json_extract(e.payload, '$.measurement.col'),
           json_extract(e.payload, '$.measurement.raw'),
           e.seq
    FROM events e
    WHERE e.kind = 'correction';

-- The current view of each cycle, clustered by its batch id: a WITHOUT ROWID table is one
-- B-tree where the rowid table with its TEXT primary key was two (table and key index).
CREATE TABLE cycles_by_batch (
    batch_id             TEXT PRIMARY KEY,
    lot                  TEXT,
    cycle_no             INTEGER,
    started_at           TEXT,
    duration_s           REAL,
    temperature_k        REAL,
    substrate_mol        REAL,
    catalyst_mass_g      REAL,
    metal_charged_mol    REAL,
    conversion           REAL,
    selectivity          REAL,
    yield                REAL,
    product_mass_g       REAL,
    metal_in_product_ug_g REAL,
    catalyst_recovered_g REAL,
    conflicts            INTEGER NOT NULL DEFAULT 0,
    excluded             INTEGER NOT NULL DEFAULT 0,
    first_seq            INTEGER NOT NULL
) STRICT, WITHOUT ROWID;
INSERT INTO cycles_by_batch SELECT batch_id, lot, cycle_no, started_at, duration_s,
    temperature_k, substrate_mol, catalyst_mass_g, metal_charged_mol, conversion,
    selectivity, yield, product_mass_g, metal_in_product_ug_g, catalyst_recovered_g,
    conflicts, excluded, first_seq FROM cycles;
DROP TABLE cycles;
ALTER TABLE cycles_by_batch RENAME TO cycles;
CREATE INDEX cycles_lot ON cycles(lot);

-- A content is ingested once. The index holds the 32 bytes of the SHA-256 rather than its
-- 64 hex characters: a hash lands on a random page, so every commit rewrites the pages it
-- touched, and half the key size halves the pages. Lookups use the same expression.
DROP INDEX source_files_ingested_once;
CREATE UNIQUE INDEX source_files_ingested_once ON source_files(unhex(sha256))
    WHERE outcome = 'ingested';
