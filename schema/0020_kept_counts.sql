-- 0020: the totals that `status` and the lot lists show, kept as rows are written, so
-- that reading them costs the same at ten lots as at ten thousand. Before, each read
-- counted every file and cycle row (an index walk of 40,000 entries and more
-- at a decade) and found the lots the cycles name by one seek a lot.
--
-- The writers of `source_files` and `cycles` add what they wrote to these in the same
-- transaction (`store::totals`); a full `verify` recounts them. (Triggers were tried:
-- each statement that fires one keeps a statement journal of the pages it changes, and
-- a backfill took half again as long.)

CREATE TABLE kept_totals (
    -- files-ingested, files-rejected, files-duplicate, cycles, cycles-without-lot,
    -- conflicts (the sum of the cycles' conflicting values)
    name  TEXT    PRIMARY KEY,
    n     INTEGER NOT NULL CHECK (n >= 0)
) STRICT, WITHOUT ROWID;

-- Files ingested per minute of `seen_at` (its first 16 characters, 'YYYY-MM-DDTHH:MM'):
-- a count over the last hour or day adds at most 1,440 of these and counts rows only in
-- the minute the window starts in.
CREATE TABLE ingested_by_minute (
    minute TEXT    PRIMARY KEY,
    n      INTEGER NOT NULL CHECK (n >= 0)
) STRICT, WITHOUT ROWID;

-- Cycles a lot name holds (a row that falls to 0 is removed): the lots the cycles name, read
-- as a small table instead of a skip scan of the cycles' lot index.
CREATE TABLE lot_cycle_counts (
    lot TEXT    PRIMARY KEY,
    n   INTEGER NOT NULL CHECK (n >= 0)
) STRICT, WITHOUT ROWID;

INSERT INTO kept_totals(name, n)
    SELECT 'files-ingested', COUNT(*) FROM source_files WHERE outcome = 'ingested'
    UNION ALL SELECT 'files-rejected', COUNT(*) FROM source_files WHERE outcome = 'rejected'
    UNION ALL SELECT 'files-duplicate', COUNT(*) FROM source_files WHERE outcome = 'duplicate'
    UNION ALL SELECT 'cycles', COUNT(*) FROM cycles
    UNION ALL SELECT 'cycles-without-lot', COUNT(*) FROM cycles WHERE lot IS NULL
    UNION ALL SELECT 'conflicts', COALESCE(SUM(conflicts), 0) FROM cycles WHERE conflicts > 0;

INSERT INTO ingested_by_minute(minute, n)
    SELECT substr(seen_at, 1, 16), COUNT(*) FROM source_files WHERE outcome = 'ingested'
    GROUP BY 1;

INSERT INTO lot_cycle_counts(lot, n)
    SELECT lot, COUNT(*) FROM cycles WHERE lot IS NOT NULL GROUP BY lot;

-- Whether the kept printed entries cover every cycle (`lots --json`) sums their cycle
-- counts: through this index, not through the entries' rows of about 1.4 KB each.
CREATE INDEX lot_printed_cycles ON lot_printed(engine_version, config_sha256, form, lot, cycles);
