-- Indexes fitted to the queries turnbook runs.
--
-- `source_files_sha` duplicated the partial unique index that every hash lookup uses
-- (`WHERE sha256 = ? AND outcome = 'ingested'`); a SHA-256 key lands on a random page, so
-- each extra index of it dirties about one page per file in a backfill.
DROP INDEX source_files_sha;

-- The service skips a file whose path, size and mtime were recorded before.
CREATE INDEX source_files_path ON source_files(path);

-- The newest exclusion of a lot's batches, when its fit is recomputed (exclusions are few;
-- the index holds only them).
CREATE INDEX events_exclusion ON events(subject, seq) WHERE kind = 'exclusion';

-- Measurements are looked up by batch, and by batch up to an event (a lot as it stood, the
-- newest record of a lot); no query selects by quantity. Same size as the index it replaces.
DROP INDEX measurements_batch;
CREATE INDEX measurements_batch_seq ON measurements(batch_id, event_seq);
