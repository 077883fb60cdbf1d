-- 0017: the lot list reads a small row a lot.
--
-- `lot_states` held each lot's `lots` line (about 1 KB) beside the alert rules' snapshot
-- (about 8 KB, every model's fit): `lots` and `status`, which read only the lines, read a
-- 16 KB page a lot (16 MB at 1,000 lots). The snapshots move to a table of their own,
-- written in the same transaction as the line; `lot_states` keeps which event, engine and
-- settings both were made by. The table is rebuilt rather than altered: dropping the
-- column in place would leave each row alone on its page.
CREATE TABLE lot_snapshots (
    lot TEXT PRIMARY KEY,
    snapshot TEXT
) STRICT;
INSERT INTO lot_snapshots(lot, snapshot) SELECT lot, snapshot FROM lot_states ORDER BY lot;
CREATE TABLE lot_states_0017 (
    lot TEXT PRIMARY KEY,
    after_seq INTEGER NOT NULL,
    engine_version TEXT NOT NULL,
    config_sha256 TEXT NOT NULL,
    computed_at TEXT NOT NULL,
    line TEXT NOT NULL
) STRICT;
INSERT INTO lot_states_0017(lot, after_seq, engine_version, config_sha256, computed_at, line)
SELECT lot, after_seq, engine_version, config_sha256, computed_at, line FROM lot_states
ORDER BY lot;
DROP TABLE lot_states;
ALTER TABLE lot_states_0017 RENAME TO lot_states;

-- The lots with a batch since the history cut-off (status, the digest) read the batches'
-- lots from the index alone, not each batch's row: `started_at` with `lot`. The index
-- keeps its name; its first column is the same.
DROP INDEX cycles_started;
CREATE INDEX cycles_started ON cycles(started_at, lot);

-- The outbox's waiting messages (status counts them, the web view shows the oldest) and
-- the digest's questions (when the last digest was queued, what was queued since) go
-- through indexes, not through every message's row and body.
CREATE INDEX alert_outbox_waiting ON alert_outbox(queued_at) WHERE delivered_at IS NULL;
CREATE INDEX alert_outbox_rule_queued ON alert_outbox(rule, queued_at);
CREATE INDEX alert_outbox_queued ON alert_outbox(queued_at);
