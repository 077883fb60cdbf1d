-- Derived results: lot metrics and fits, recomputed whenever a lot's records change.
-- They are not part of the audit chain (they can always be recomputed from it), but each
-- carries the engine version and the event it was computed after, so a report can show
-- what was known when.
CREATE TABLE fits (
    id             INTEGER PRIMARY KEY,
    lot            TEXT    NOT NULL,
    computed_at    TEXT    NOT NULL,
    after_seq      INTEGER NOT NULL,
    engine_version TEXT    NOT NULL,
    basis          TEXT    NOT NULL,     -- what was fitted: activity-vs-cycle, ton-vs-cycle, ...
    model          TEXT,                 -- chosen model id, NULL when nothing could be fitted
    analysis       TEXT    NOT NULL      -- JSON of the full analysis
) STRICT;
CREATE INDEX fits_lot ON fits(lot, id);
