-- 0010: an open alert's severity can step down ("eased") as well as up ("worse").
--
-- The state CHECKs gain 'eased'. The outbox's UNIQUE (alert_key, episode, state, severity)
-- gives way to the Message-ID alone, which now also counts the messages of the episode:
-- a condition that goes warning -> critical -> warning -> critical sends each change once,
-- and a resend after a crash (the same transaction, the same count) is still the same
-- message. A CHECK cannot be altered in place, so both tables are rebuilt (SQLite's
-- documented procedure, as in 0006).

CREATE TABLE alert_condition_0010 (
    alert_key         TEXT PRIMARY KEY,
    rule              TEXT NOT NULL,
    lot               TEXT NOT NULL,
    state             TEXT NOT NULL
                      CHECK (state = 'open' OR state = 'worse' OR state = 'eased'
                             OR state = 'cleared'),
    severity          INTEGER NOT NULL CHECK (severity BETWEEN 1 AND 3),
    episode           INTEGER NOT NULL CHECK (episode >= 1),
    thread_message_id TEXT NOT NULL,
    changed_at        TEXT NOT NULL
) STRICT;
INSERT INTO alert_condition_0010 (rowid, alert_key, rule, lot, state, severity, episode,
        thread_message_id, changed_at)
    SELECT rowid, alert_key, rule, lot, state, severity, episode, thread_message_id, changed_at
    FROM alert_condition;
DROP TABLE alert_condition;
ALTER TABLE alert_condition_0010 RENAME TO alert_condition;

CREATE TABLE alert_outbox_0010 (
    id              INTEGER PRIMARY KEY,
    alert_key       TEXT NOT NULL,
    rule            TEXT NOT NULL,
    lot             TEXT NOT NULL,
    episode         INTEGER NOT NULL,
    state           TEXT NOT NULL
                    CHECK (state = 'open' OR state = 'worse' OR state = 'eased'
                           OR state = 'cleared'),
    severity        INTEGER NOT NULL CHECK (severity BETWEEN 1 AND 3),
    message_id      TEXT NOT NULL UNIQUE,
    in_reply_to     TEXT,
    subject         TEXT NOT NULL,
    body_text       TEXT NOT NULL,
    body_html       TEXT NOT NULL,
    recipients      TEXT NOT NULL,
    queued_at       TEXT NOT NULL,
    attempts        INTEGER NOT NULL DEFAULT 0 CHECK (attempts >= 0),
    next_attempt_at TEXT,
    last_error      TEXT,
    delivered_at    TEXT,
    server_reply    TEXT
) STRICT;
INSERT INTO alert_outbox_0010 (id, alert_key, rule, lot, episode, state, severity,
        message_id, in_reply_to, subject, body_text, body_html, recipients, queued_at,
        attempts, next_attempt_at, last_error, delivered_at, server_reply)
    SELECT id, alert_key, rule, lot, episode, state, severity, message_id, in_reply_to,
        subject, body_text, body_html, recipients, queued_at, attempts, next_attempt_at,
        last_error, delivered_at, server_reply
    FROM alert_outbox;
DROP TABLE alert_outbox;
ALTER TABLE alert_outbox_0010 RENAME TO alert_outbox;

-- The due index as 0003 left it, and one for an episode's messages.
CREATE INDEX alert_outbox_due ON alert_outbox (next_attempt_at)
    WHERE delivered_at IS NULL AND next_attempt_at IS NOT NULL;
CREATE INDEX alert_outbox_episode ON alert_outbox (alert_key, episode);
