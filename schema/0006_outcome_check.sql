-- 0006: the same `source_files` table, its outcome CHECK written as comparisons.
--
-- SQLite evaluates `outcome IN ('ingested', 'duplicate', 'rejected')` in a CHECK by
-- building a temporary index of the three words for every row inserted; in a backfill
-- that was about a seventh of the work of storing a file's row. Three comparisons
-- accept and refuse exactly the same values. A CHECK cannot be altered in place, so the
-- table is rebuilt (SQLite's documented procedure: the migration runs with foreign keys
-- off and checks them before it commits).

CREATE TABLE source_files_0006 (
    id            INTEGER PRIMARY KEY,
    sha256        TEXT    NOT NULL,
    path          TEXT    NOT NULL,
    size          INTEGER NOT NULL,
    mtime         TEXT,
    profile       TEXT,
    site          TEXT,
    seen_at       TEXT    NOT NULL,
    outcome       TEXT    NOT NULL
                  CHECK (outcome = 'ingested' OR outcome = 'duplicate' OR outcome = 'rejected'),
    error         TEXT,
    rows_new      INTEGER NOT NULL DEFAULT 0,
    rows_known    INTEGER NOT NULL DEFAULT 0,
    rows_conflict INTEGER NOT NULL DEFAULT 0,
    quarantined   TEXT,                  -- where a rejected file was copied
    event_seq     INTEGER NOT NULL REFERENCES events(seq)
) STRICT;
INSERT INTO source_files_0006(id, sha256, path, size, mtime, profile, site, seen_at, outcome,
        error, rows_new, rows_known, rows_conflict, quarantined, event_seq)
    SELECT id, sha256, path, size, mtime, profile, site, seen_at, outcome,
        error, rows_new, rows_known, rows_conflict, quarantined, event_seq
    FROM source_files;
DROP TABLE source_files;
ALTER TABLE source_files_0006 RENAME TO source_files;

-- The indexes as 0004 and 0005 left them.
CREATE UNIQUE INDEX source_files_ingested_once ON source_files(unhex(sha256))
    WHERE outcome = 'ingested';
CREATE INDEX source_files_path ON source_files(path);
