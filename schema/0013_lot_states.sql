-- 0013: reads in time proportional to what they show.
--
-- The status view counts files seen in the last hour and day: with no index on `seen_at`
-- each count walked every file row. (outcome, seen_at) serves those counts and the
-- counts by outcome, index-only.
CREATE INDEX source_files_outcome_seen ON source_files(outcome, seen_at);

-- The newest batch start of the store: files bring history, not news, for a lot whose
-- newest batch is long before it (`alerts.backfill_history_days`); looked up at every
-- recompute that files cause.
CREATE INDEX cycles_started ON cycles(started_at);

-- Lots whose records changed with no recompute yet. A backfill's groups add the lots they
-- touch and the closing recompute removes them, in the transactions that write them, so
-- opening the store reads this short list instead of looking up every lot's newest event.
CREATE TABLE lots_to_recompute (
    lot TEXT PRIMARY KEY
) WITHOUT ROWID, STRICT;

-- Each lot's state as `lots` and `status` show it (`line`, one line of `lots --json`) and
-- as the alert rules and the digest read it (`snapshot`, NULL for a lot nobody
-- registered), written by the recompute in the transaction that changed the lot. Derived
-- data: a row made by another engine version or under other settings is not read (the
-- state is computed again), and `after_seq` is the newest event it was made of.
CREATE TABLE lot_states (
    lot TEXT PRIMARY KEY,
    after_seq INTEGER NOT NULL,
    engine_version TEXT NOT NULL,
    config_sha256 TEXT NOT NULL,
    computed_at TEXT NOT NULL,
    line TEXT NOT NULL,
    snapshot TEXT
) STRICT;

-- Every lot of an upgraded store is recomputed once, at the next open of the writer (the
-- service's start, `ingest`): that stores its state, and heals a backfill interrupted
-- before this version (a lot whose newest fit is older than its records).
INSERT INTO lots_to_recompute(lot)
SELECT lot FROM lots UNION SELECT lot FROM cycles WHERE lot IS NOT NULL;

-- A lot's history: the events naming it or its batches, found through indexes rather
-- than by reading every event (the lot sheets' events were found by parsing each event's
-- payload). `lot_registrations` lists each event that wrote a registration of a lot.
-- Only events other than files' (people's entries, which name a lot or a batch): a file's
-- event names its path, and is found through its batches' provenance and the lot
-- registrations; indexing every file's path again would cost each backfill.
CREATE INDEX events_subject ON events(subject) WHERE kind <> 'file-ingested';
CREATE TABLE lot_registrations (
    lot TEXT NOT NULL,
    event_seq INTEGER NOT NULL REFERENCES events(seq),
    PRIMARY KEY (lot, event_seq)
) WITHOUT ROWID, STRICT;
INSERT OR IGNORE INTO lot_registrations(lot, event_seq)
SELECT json_extract(j.value, '$.lot'), e.seq FROM events e, json_each(e.payload, '$.lots') j
WHERE e.kind = 'file-ingested' AND json_extract(j.value, '$.lot') IS NOT NULL;
INSERT OR IGNORE INTO lot_registrations(lot, event_seq) SELECT lot, event_seq FROM lots;

-- The sign-offs, read by `lots` and `status` for every lot's sign-off state: few events
-- among many, found through an index of only them.
CREATE INDEX events_signoff ON events(seq) WHERE kind = 'sign-off';
