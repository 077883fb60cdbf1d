-- 0012: the outbox in the audit chain, indexes for verify's streaming replay, and the
-- record of verifications.

-- From which outbox row on every change of the outbox and of the alert conditions is an
-- event. Filled here for the rows queued so far; the first outbox write after this
-- appends an `outbox-chained` event with the same figures and records its seq, after
-- which `verify` holds this row to that event.
CREATE TABLE outbox_chain (
    id              INTEGER PRIMARY KEY CHECK (id = 1),
    first_outbox_id INTEGER NOT NULL CHECK (first_outbox_id >= 1),
    legacy_rows     INTEGER NOT NULL CHECK (legacy_rows >= 0),
    marker_seq      INTEGER
) STRICT;
INSERT INTO outbox_chain (id, first_outbox_id, legacy_rows, marker_seq)
    SELECT 1, COALESCE(MAX(id), 0) + 1, COUNT(*), NULL FROM alert_outbox;

-- verify reads the rows each stretch of events wrote: by event, not by a scan and sort of
-- whole tables. Events only grow, so both indexes are appended at their right edge.
CREATE INDEX source_files_event ON source_files (event_seq);
CREATE INDEX batch_sources_event ON batch_sources (event_seq);

-- Each recorded verification: a full replay, or the events after the last verified head.
CREATE TABLE verify_runs (
    id            INTEGER PRIMARY KEY,
    at            TEXT    NOT NULL,              -- RFC 3339 UTC
    scope         TEXT    NOT NULL CHECK (scope = 'full' OR scope = 'since-last'),
    from_seq      INTEGER NOT NULL CHECK (from_seq >= 0),  -- 0 for a full replay
    head_seq      INTEGER NOT NULL CHECK (head_seq >= 0),
    head_hash     TEXT    NOT NULL,
    ok            INTEGER NOT NULL CHECK (ok = 0 OR ok = 1),
    events        INTEGER NOT NULL,              -- events whose links were checked
    findings      INTEGER NOT NULL,
    first_finding TEXT,
    seconds       REAL    NOT NULL,
    -- HMAC-SHA-256 under the chain key of the row's figures (model::chain::record_mac),
    -- so a run row written without the key is not taken for a verification; NULL when
    -- the key was not at hand
    mac           TEXT
) STRICT;
