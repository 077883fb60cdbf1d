-- turnbook core records: the event log (audit chain), source files, lots, measurements
-- and the current view of each cycle. Every row here is written by one event; `verify`
-- replays the events and compares them with these tables.

-- The audit chain. Each event carries the SHA-256 of the one before it; the payload is
-- canonical JSON holding every record the event wrote.
CREATE TABLE events (
    seq       INTEGER PRIMARY KEY,
    at        TEXT    NOT NULL,          -- RFC 3339, UTC
    actor     TEXT    NOT NULL,          -- OS user or configured name
    kind      TEXT    NOT NULL,          -- file-ingested, file-duplicate, file-rejected, lot-registered, ...
    subject   TEXT    NOT NULL,          -- the lot, batch or file the event is about
    payload   TEXT    NOT NULL,          -- canonical JSON
    prev_hash TEXT    NOT NULL,          -- hash of event seq-1 ('0' x 64 for the first)
    hash      TEXT    NOT NULL
) STRICT;

-- Guards against accidents; deliberate tampering is caught by the chain instead.
CREATE TRIGGER events_append_only_update BEFORE UPDATE ON events
BEGIN SELECT RAISE(ABORT, 'the event log is append-only'); END;
CREATE TRIGGER events_append_only_delete BEFORE DELETE ON events
BEGIN SELECT RAISE(ABORT, 'the event log is append-only'); END;

-- Every file offered to turnbook, whatever became of it.
CREATE TABLE source_files (
    id            INTEGER PRIMARY KEY,
    sha256        TEXT    NOT NULL,
    path          TEXT    NOT NULL,
    size          INTEGER NOT NULL,
    mtime         TEXT,
    profile       TEXT,
    site          TEXT,
    seen_at       TEXT    NOT NULL,
    outcome       TEXT    NOT NULL CHECK (outcome IN ('ingested', 'duplicate', 'rejected')),
    error         TEXT,
    rows_new      INTEGER NOT NULL DEFAULT 0,
    rows_known    INTEGER NOT NULL DEFAULT 0,
    rows_conflict INTEGER NOT NULL DEFAULT 0,
    quarantined   TEXT,                  -- where a rejected file was copied
    event_seq     INTEGER NOT NULL REFERENCES events(seq)
) STRICT;
-- One content is ingested once: the database itself refuses a second ingestion.
CREATE UNIQUE INDEX source_files_ingested_once ON source_files(sha256) WHERE outcome = 'ingested';
CREATE INDEX source_files_sha ON source_files(sha256);

-- Catalyst lots: the current registration; earlier versions live in the events.
CREATE TABLE lots (
    lot            TEXT PRIMARY KEY,
    catalyst       TEXT NOT NULL,
    metal          TEXT NOT NULL,
    loading_wt_pct REAL NOT NULL,
    charged_mass_g REAL NOT NULL,
    received       TEXT,
    supplier_lot   TEXT,
    cost           REAL,
    site           TEXT,
    event_seq      INTEGER NOT NULL REFERENCES events(seq)
) STRICT;

-- Every value ever read or entered, append-only, with where it came from.
-- kind: 'observed' (first value from a file), 'conflict' (a later file disagreed),
-- 'correction' (entered by a person with a reason, in the event).
CREATE TABLE measurements (
    id             INTEGER PRIMARY KEY,
    batch_id       TEXT    NOT NULL,
    quantity       TEXT    NOT NULL,     -- a quantity key, or lot / cycle_no / started_at
    value          REAL,                 -- canonical unit (see Quantity::canonical_unit)
    text           TEXT,                 -- for lot, started_at
    kind           TEXT    NOT NULL CHECK (kind IN ('observed', 'conflict', 'correction')),
    source_file_id INTEGER REFERENCES source_files(id),
    line           INTEGER,
    col            INTEGER,
    raw            TEXT,
    event_seq      INTEGER NOT NULL REFERENCES events(seq)
) STRICT;
CREATE INDEX measurements_batch ON measurements(batch_id, quantity);
CREATE TRIGGER measurements_append_only BEFORE UPDATE ON measurements
BEGIN SELECT RAISE(ABORT, 'measurements are append-only; enter a correction'); END;

-- The current view of each cycle (one batch = one cycle of a lot), derived from the
-- measurements in the same transaction. `verify` recomputes it.
CREATE TABLE cycles (
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
) STRICT;
CREATE INDEX cycles_lot ON cycles(lot);
