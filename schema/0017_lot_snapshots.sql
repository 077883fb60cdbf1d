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
