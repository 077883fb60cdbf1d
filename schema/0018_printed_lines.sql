-- 0018: each lot's `lots --json` entry kept as it is printed.
--
-- Reading the stored lines, parsing each and printing it again cost about 14 µs a lot.
-- Each lot's entry is kept here in its printed form (pretty JSON at its place in the
-- array) up to the parts that vary when it is read: the forecast's `as_of` (today) is
-- written between `head` and `tail`, and the sign-off (another table) after them. A row
-- is written in the transaction that stores the lot's state, which first deletes the old
-- one, so a row is never older than the state; it also carries what the state was made
-- by. `form` names the printing code that wrote it: another build prints from the state.
-- `cycles` is the state's count of the lot's cycles: when the kept entries' counts add up
-- to every cycle that names a lot, no lot with cycles lacks one, and the list need not
-- look each lot up in `cycles`. Rows are kept in lot order (WITHOUT ROWID), the order the
-- list prints them in.
CREATE TABLE lot_printed (
    lot TEXT PRIMARY KEY,
    engine_version TEXT NOT NULL,
    config_sha256 TEXT NOT NULL,
    form TEXT NOT NULL,
    cycles INTEGER NOT NULL,
    head TEXT NOT NULL,
    tail TEXT
) STRICT, WITHOUT ROWID;
