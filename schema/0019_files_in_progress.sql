-- 0019: a large export stored over several transactions. Its `file-rows` parts commit one
-- by one (the write lock is free between them, so other files land meanwhile), and its
-- `file-ingested` event and `source_files` row come last. Until then the file is listed
-- here: the id its rows name, how far its rows are stored and its running totals, so that
-- a file offered again after a crash resumes after its last stored part.

CREATE TABLE files_in_progress (
    file_id       INTEGER PRIMARY KEY,
    sha256        TEXT    NOT NULL UNIQUE,
    path          TEXT    NOT NULL,
    chunk_rows    INTEGER NOT NULL CHECK (chunk_rows >= 1),   -- rows a chunk holds
    chunks_done   INTEGER NOT NULL CHECK (chunks_done >= 0),  -- chunks of rows stored
    parts         INTEGER NOT NULL CHECK (parts >= 0),        -- `file-rows` events written
    rows_new      INTEGER NOT NULL DEFAULT 0,
    rows_known    INTEGER NOT NULL DEFAULT 0,
    rows_conflict INTEGER NOT NULL DEFAULT 0,
    lots          TEXT    NOT NULL DEFAULT '[]',              -- JSON array of lots touched
    last_seq      INTEGER REFERENCES events(seq),             -- its newest part
    started_at    TEXT    NOT NULL
) STRICT;

-- The parts' provenance rows name their file before its `source_files` row exists (it is
-- written last, with the file's totals), in earlier transactions: the reference from
-- `batch_sources.source_file_id` can no longer be a foreign key. `verify` checks it
-- instead: every provenance row equals the event that wrote it, and that event's values
-- name the file whose row its closing event writes. The table is rebuilt the documented
-- way (foreign keys are off while migrations run).
CREATE TABLE batch_sources_0019 (
    batch_id       TEXT    NOT NULL,
    event_seq      INTEGER NOT NULL REFERENCES events(seq),
    line           INTEGER NOT NULL CHECK (line >= 0),
    source_file_id INTEGER,
    PRIMARY KEY (batch_id, event_seq, line)
) STRICT, WITHOUT ROWID;
INSERT INTO batch_sources_0019(batch_id, event_seq, line, source_file_id)
    SELECT batch_id, event_seq, line, source_file_id FROM batch_sources;
DROP TABLE batch_sources;
ALTER TABLE batch_sources_0019 RENAME TO batch_sources;
CREATE INDEX batch_sources_event ON batch_sources (event_seq);
