-- 0003: the durable alert outbox.
-- Written in the same transaction as the records that raised the alert, so an alert exists
-- exactly when its evidence was committed. References other tables only by plain values.

-- Current state of each alert condition (one row per alert key).
CREATE TABLE alert_condition (
    alert_key         TEXT PRIMARY KEY,
    rule              TEXT NOT NULL,
    lot               TEXT NOT NULL,
    state             TEXT NOT NULL CHECK (state IN ('open', 'worse', 'cleared')),
    -- highest severity of the current episode: 1 info, 2 warning, 3 critical
    severity          INTEGER NOT NULL CHECK (severity BETWEEN 1 AND 3),
    -- an episode runs from an 'open' to its 'cleared'; a new opening starts the next one
    episode           INTEGER NOT NULL CHECK (episode >= 1),
    thread_message_id TEXT NOT NULL,
    changed_at        TEXT NOT NULL
) STRICT;

-- Every composed message, kept after delivery as the record of who was told what, when.
CREATE TABLE alert_outbox (
    id              INTEGER PRIMARY KEY,
    alert_key       TEXT NOT NULL,
    rule            TEXT NOT NULL,
    lot             TEXT NOT NULL,
    episode         INTEGER NOT NULL,
    state           TEXT NOT NULL CHECK (state IN ('open', 'worse', 'cleared')),
    severity        INTEGER NOT NULL CHECK (severity BETWEEN 1 AND 3),
    message_id      TEXT NOT NULL UNIQUE,
    in_reply_to     TEXT,
    subject         TEXT NOT NULL,
    body_text       TEXT NOT NULL,
    body_html       TEXT NOT NULL,
    recipients      TEXT NOT NULL,           -- JSON array of addresses
    queued_at       TEXT NOT NULL,           -- RFC 3339 UTC, millisecond precision
    attempts        INTEGER NOT NULL DEFAULT 0 CHECK (attempts >= 0),
    next_attempt_at TEXT,                    -- NULL once delivered, or held (no recipients)
    last_error      TEXT,
    delivered_at    TEXT,
    server_reply    TEXT,
    -- the same condition in the same state is never queued twice
    UNIQUE (alert_key, episode, state, severity)
) STRICT;

CREATE INDEX alert_outbox_due ON alert_outbox (next_attempt_at)
    WHERE delivered_at IS NULL AND next_attempt_at IS NOT NULL;
