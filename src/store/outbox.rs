//! The durable outbox: alerts become rows in the caller's transaction, and the mailer
//! works the rows off until each is delivered.
//!
//! `alert_condition` remembers the state of every alert key; it is what turns the rules'
//! open/cleared verdicts into messages: a new opening, a rise in severity ("worse") and a
//! clearing each queue one message, a repeat of the same verdict queues nothing.
//!
//! Every change of either table is also an event of the audit chain, appended in the same
//! transaction: `alert-queued` (the row and the condition as written) and `mail-outcome`
//! (the delivery columns after an attempt), so `verify` replays both tables. The first
//! such write after the upgrade appends `outbox-chained`, which records from which row on
//! the outbox is in the chain.

use chrono::{DateTime, Utc};
use rusqlite::{Connection, OptionalExtension, Transaction, params};

use super::{Result, StoreError};
use crate::alert::{Alert, AlertState, ComposedMessage, Severity, compose_alert};
use crate::alert::{AlertChange, OpenAlert};
use crate::alert::{Condition, backoff, decide, message_id_for};
use crate::model::Payload;
use crate::model::event::{DeliveryState, QueuedMessage};
use crate::model::time::{format_ts, parse_ts};

/// The actor of the outbox's events: the service's own rules and mailer, not a person.
pub const OUTBOX_ACTOR: &str = "turnbook";

/// Hex SHA-256 of a text, as the outbox's events hold a message's subject and bodies.
pub fn text_sha256(text: &str) -> String {
    use sha2::{Digest, Sha256};
    hex::encode(Sha256::digest(text.as_bytes()))
}

/// Append the `outbox-chained` marker once: the first outbox write after the upgrade
/// records, in the chain, the first row it covers and how many rows were queued before.
fn ensure_chained(tx: &Transaction, now: &str) -> Result<()> {
    let row: Option<(i64, i64, Option<i64>)> = tx
        .query_row(
            "SELECT first_outbox_id, legacy_rows, marker_seq FROM outbox_chain WHERE id = 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?, r.get(2)?)),
        )
        .optional()?;
    let (first, legacy) = match row {
        Some((_, _, Some(_))) => return Ok(()),
        Some((first, legacy, None)) => (first, legacy),
        None => tx.query_row(
            "SELECT COALESCE(MAX(id), 0) + 1, COUNT(*) FROM alert_outbox",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )?,
    };
    let payload = Payload::OutboxChained {
        first_outbox_id: first,
        legacy_rows: legacy,
    };
    let seq = super::events::append(tx, now, OUTBOX_ACTOR, "outbox", &payload)?;
    tx.execute(
        "INSERT INTO outbox_chain (id, first_outbox_id, legacy_rows, marker_seq) \
         VALUES (1, ?1, ?2, ?3) ON CONFLICT (id) DO UPDATE SET marker_seq = excluded.marker_seq",
        params![first, legacy, seq],
    )?;
    Ok(())
}

fn corrupt(id: i64, what: String) -> StoreError {
    StoreError::Invalid(format!("stored outbox row {id} is damaged: {what}"))
}

fn load_condition(tx: &Transaction, key: &str) -> Result<Option<Condition>> {
    let row = tx
        .query_row(
            "SELECT state, severity, episode, thread_message_id FROM alert_condition \
             WHERE alert_key = ?1",
            [key],
            |r| {
                Ok((
                    r.get::<_, String>(0)?,
                    r.get::<_, i64>(1)?,
                    r.get::<_, i64>(2)?,
                    r.get::<_, String>(3)?,
                ))
            },
        )
        .optional()?;
    let Some((state, sev, episode, thread)) = row else {
        return Ok(None);
    };
    let corrupt = |what: &str| corrupt(episode, format!("alert_condition {key:?}: {what}"));
    Ok(Some(Condition {
        state: AlertState::parse(&state).ok_or_else(|| corrupt("state"))?,
        severity: Severity::from_level(sev).ok_or_else(|| corrupt("severity"))?,
        episode,
        thread,
    }))
}

/// Queue the messages these alerts call for, inside the caller's transaction.
///
/// Returns how many outbox rows were written. An alert without recipients is still
/// recorded (so the history shows it was raised) but held: it is never attempted.
pub fn enqueue(tx: &Transaction, alerts: &[Alert], now: &str) -> Result<usize> {
    let now = format_ts(parse_ts(now)?);
    let mut queued = 0;
    for alert in alerts {
        let prev = load_condition(tx, &alert.key)?;
        let Some((state, episode, severity)) = decide(alert, prev.as_ref()) else {
            continue;
        };
        let step: i64 = tx.query_row(
            "SELECT COUNT(*) FROM alert_outbox WHERE alert_key = ?1 AND episode = ?2",
            params![alert.key, episode],
            |r| r.get(0),
        )?;
        let message_id = message_id_for(&alert.key, episode, step, state, severity);
        let thread = match (&prev, state) {
            (Some(c), AlertState::Worse | AlertState::Eased | AlertState::Cleared) => {
                Some(c.thread.clone())
            }
            _ => None,
        };
        let mut shown = alert.clone();
        shown.severity = severity;
        let msg = compose_alert(&shown, state, &message_id, thread.as_deref());
        let condition_thread = thread.clone().unwrap_or_else(|| message_id.clone());
        let n = insert_message(
            tx,
            &Queued {
                key: &alert.key,
                rule: alert.rule.as_str(),
                lot: &alert.lot,
                episode,
                state,
                severity,
            },
            &msg,
            &now,
            Some(&condition_thread),
        )?;
        queued += n;
        tx.execute(
            "INSERT INTO alert_condition \
               (alert_key, rule, lot, state, severity, episode, thread_message_id, changed_at) \
             VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8) \
             ON CONFLICT (alert_key) DO UPDATE SET state = excluded.state, \
               severity = excluded.severity, episode = excluded.episode, \
               thread_message_id = excluded.thread_message_id, changed_at = excluded.changed_at",
            params![
                alert.key,
                alert.rule.as_str(),
                alert.lot,
                state.as_str(),
                severity as i64,
                episode,
                condition_thread,
                now
            ],
        )?;
        tracing::info!(
            key = %alert.key, state = state.as_str(), severity = severity.as_str(),
            "alert queued"
        );
    }
    Ok(queued)
}

/// What an outbox row is about: its condition's key, rule, lot, episode, state, severity.
struct Queued<'a> {
    key: &'a str,
    rule: &'a str,
    lot: &'a str,
    episode: i64,
    state: AlertState,
    severity: Severity,
}

/// Insert one message and append its `alert-queued` event (with `thread`, the condition's
/// thread after the change; None for a digest).
fn insert_message(
    tx: &Transaction,
    q: &Queued<'_>,
    msg: &ComposedMessage,
    now: &str,
    thread: Option<&str>,
) -> Result<usize> {
    let Queued {
        key,
        rule,
        lot,
        episode,
        state,
        severity,
    } = *q;
    ensure_chained(tx, now)?;
    let recipients = serde_json::to_string(&msg.recipients)?;
    let (next, err) = if msg.recipients.is_empty() {
        tracing::warn!(key, "alert has no recipients configured; recorded but held");
        (None, Some("held: no recipients configured"))
    } else {
        (Some(now), None)
    };
    let n = tx.execute(
        "INSERT OR IGNORE INTO alert_outbox \
           (alert_key, rule, lot, episode, state, severity, message_id, in_reply_to, subject, \
            body_text, body_html, recipients, queued_at, next_attempt_at, last_error) \
         VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8, ?9, ?10, ?11, ?12, ?13, ?14, ?15)",
        params![
            key,
            rule,
            lot,
            episode,
            state.as_str(),
            severity as i64,
            msg.message_id,
            msg.in_reply_to,
            msg.subject,
            msg.text,
            msg.html,
            recipients,
            now,
            next,
            err
        ],
    )?;
    let event = QueuedMessage {
        outbox_id: (n > 0).then(|| tx.last_insert_rowid()),
        alert_key: key.to_string(),
        rule: rule.to_string(),
        lot: lot.to_string(),
        episode,
        state: state.as_str().to_string(),
        severity: severity as i64,
        message_id: msg.message_id.clone(),
        in_reply_to: msg.in_reply_to.clone(),
        subject_sha256: text_sha256(&msg.subject),
        body_text_sha256: text_sha256(&msg.text),
        body_html_sha256: text_sha256(&msg.html),
        recipients: msg.recipients.clone(),
        queued_at: now.to_string(),
        next_attempt_at: next.map(str::to_string),
        last_error: err.map(str::to_string),
        thread_message_id: thread.map(str::to_string),
    };
    super::events::append(tx, now, OUTBOX_ACTOR, key, &Payload::AlertQueued(event))?;
    Ok(n)
}

/// Queue a digest (or any composed message not tied to an alert condition). `key` names
/// the period, e.g. `digest|2026-12-07`; the same key is never queued twice.
pub fn enqueue_message(
    tx: &Transaction,
    key: &str,
    msg: &ComposedMessage,
    now: &str,
) -> Result<usize> {
    let now = format_ts(parse_ts(now)?);
    insert_message(
        tx,
        &Queued {
            key,
            rule: "digest",
            lot: "",
            episode: 1,
            state: AlertState::Open,
            severity: Severity::Info,
        },
        msg,
        &now,
        None,
    )
}

/// A queued message awaiting delivery.
#[derive(Debug, Clone, PartialEq)]
pub struct PendingMessage {
    pub id: i64,
    pub message: ComposedMessage,
    pub rule: String,
    pub lot: String,
    pub queued_at: DateTime<Utc>,
    pub attempts: u32,
}

/// Messages whose next attempt is due at `now`, oldest first.
pub fn due_messages(
    conn: &Connection,
    now: DateTime<Utc>,
    limit: usize,
) -> Result<Vec<PendingMessage>> {
    let mut st = conn.prepare(
        "SELECT id, message_id, in_reply_to, subject, body_text, body_html, recipients, \
                queued_at, attempts, rule, lot \
         FROM alert_outbox \
         WHERE delivered_at IS NULL AND next_attempt_at IS NOT NULL AND next_attempt_at <= ?1 \
         ORDER BY id LIMIT ?2",
    )?;
    let lim = i64::try_from(limit).unwrap_or(i64::MAX);
    let rows = st.query_map(params![format_ts(now), lim], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, Option<String>>(2)?,
            r.get::<_, String>(3)?,
            r.get::<_, String>(4)?,
            r.get::<_, String>(5)?,
            r.get::<_, String>(6)?,
            r.get::<_, String>(7)?,
            r.get::<_, i64>(8)?,
            r.get::<_, String>(9)?,
            r.get::<_, String>(10)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (id, mid, irt, subject, text, html, rcpt, queued, attempts, rule, lot) = row?;
        let recipients: Vec<String> =
            serde_json::from_str(&rcpt).map_err(|e| corrupt(id, format!("recipients: {e}")))?;
        let queued_at = parse_ts(&queued).map_err(|_| corrupt(id, "queued_at".into()))?;
        out.push(PendingMessage {
            id,
            message: ComposedMessage {
                message_id: mid,
                in_reply_to: irt,
                subject,
                text,
                html,
                recipients,
            },
            rule,
            lot,
            queued_at,
            attempts: u32::try_from(attempts).unwrap_or(u32::MAX),
        });
    }
    Ok(out)
}

/// After an attempt changed row `id` (in `tx`): append its `mail-outcome` event with the
/// delivery columns as they now stand, and commit.
fn record_outcome(tx: Transaction, id: i64, outcome: &str, now: &str) -> Result<()> {
    ensure_chained(&tx, now)?;
    let state = tx.query_row(
        "SELECT message_id, attempts, next_attempt_at, last_error, delivered_at, server_reply \
         FROM alert_outbox WHERE id = ?1",
        [id],
        |r| {
            Ok(DeliveryState {
                outbox_id: id,
                message_id: r.get(0)?,
                outcome: outcome.to_string(),
                attempts: r.get(1)?,
                next_attempt_at: r.get(2)?,
                last_error: r.get(3)?,
                delivered_at: r.get(4)?,
                server_reply: r.get(5)?,
            })
        },
    )?;
    let subject = format!("outbox {id}");
    super::events::append(
        &tx,
        now,
        OUTBOX_ACTOR,
        &subject,
        &Payload::MailOutcome(state),
    )?;
    tx.commit()?;
    Ok(())
}

/// A transaction on a shared connection that takes the write lock at once.
fn write_tx(conn: &Connection) -> Result<Transaction<'_>> {
    Ok(Transaction::new_unchecked(
        conn,
        rusqlite::TransactionBehavior::Immediate,
    )?)
}

/// Record a successful hand-over with the server's reply, and its event.
pub fn mark_delivered(conn: &Connection, id: i64, now: DateTime<Utc>, reply: &str) -> Result<()> {
    let tx = write_tx(conn)?;
    let now = format_ts(now);
    let n = tx.execute(
        "UPDATE alert_outbox SET delivered_at = ?2, server_reply = ?3, next_attempt_at = NULL, \
           attempts = attempts + 1, last_error = NULL WHERE id = ?1 AND delivered_at IS NULL",
        params![id, now, reply],
    )?;
    if n == 0 {
        return Ok(());
    }
    record_outcome(tx, id, "sent", &now)
}

/// Record a failed attempt and schedule the next one with [`backoff`]. Returns the time
/// of the next attempt.
pub fn mark_failed(
    conn: &Connection,
    id: i64,
    attempts_before: u32,
    now: DateTime<Utc>,
    error: &str,
) -> Result<DateTime<Utc>> {
    let attempts = attempts_before.saturating_add(1);
    let delay = chrono::Duration::from_std(backoff(attempts))
        .unwrap_or_else(|_| chrono::Duration::hours(1));
    let next = now.checked_add_signed(delay).unwrap_or(now);
    let tx = write_tx(conn)?;
    let n = tx.execute(
        "UPDATE alert_outbox SET attempts = ?2, next_attempt_at = ?3, last_error = ?4 \
         WHERE id = ?1 AND delivered_at IS NULL",
        params![id, i64::from(attempts), format_ts(next), error],
    )?;
    if n > 0 {
        record_outcome(tx, id, "failed", &format_ts(now))?;
    }
    Ok(next)
}

fn parse_state(key: &str, state: &str, sev: i64) -> Result<(AlertState, Severity)> {
    match (AlertState::parse(state), Severity::from_level(sev)) {
        (Some(st), Some(sv)) => Ok((st, sv)),
        _ => Err(corrupt(
            0,
            format!("alert {key:?}: state {state:?} / severity {sev}"),
        )),
    }
}

/// Alerts whose condition is currently open (open, worse or eased), most severe first,
/// then by lot and rule.
pub fn open_alerts(conn: &Connection) -> Result<Vec<OpenAlert>> {
    let mut out: Vec<OpenAlert> = conditions(conn)?
        .into_iter()
        .filter(|c| c.state != AlertState::Cleared)
        .map(|c| OpenAlert {
            key: c.key,
            rule: c.rule,
            lot: c.lot,
            state: c.state,
            severity: c.severity,
            since: c.changed_at,
            subject: c.subject,
        })
        .collect();
    out.sort_by(|a, b| {
        b.severity
            .cmp(&a.severity)
            .then_with(|| a.lot.cmp(&b.lot))
            .then_with(|| a.rule.cmp(&b.rule))
    });
    Ok(out)
}

/// Alert messages queued at or after `since` (digests excluded), oldest first.
pub fn changes_since(conn: &Connection, since: &str) -> Result<Vec<AlertChange>> {
    let since = format_ts(parse_ts(since)?);
    let mut st = conn.prepare(
        "SELECT queued_at, alert_key, lot, state, severity, subject FROM alert_outbox \
         WHERE queued_at >= ?1 AND rule <> 'digest' ORDER BY id",
    )?;
    let rows = st.query_map([since], |r| {
        Ok((
            r.get::<_, String>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
            r.get::<_, String>(3)?,
            r.get::<_, i64>(4)?,
            r.get::<_, String>(5)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (at, key, lot, state, sev, subject) = row?;
        let (state, severity) = parse_state(&key, &state, sev)?;
        out.push(AlertChange {
            at,
            key,
            lot,
            state,
            severity,
            subject,
        });
    }
    Ok(out)
}

/// Messages not yet delivered.
pub fn waiting(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row(
        "SELECT COUNT(*) FROM alert_outbox WHERE delivered_at IS NULL",
        [],
        |r| r.get(0),
    )?)
}

/// When the newest digest was queued.
pub fn last_digest(conn: &Connection) -> Result<Option<DateTime<Utc>>> {
    let last: Option<String> = conn.query_row(
        "SELECT MAX(queued_at) FROM alert_outbox WHERE rule = 'digest'",
        [],
        |r| r.get(0),
    )?;
    Ok(last.and_then(|s| parse_ts(&s).ok()))
}

/// One message of a lot's alerts, and whether its condition is still open.
#[derive(Debug, Clone)]
pub struct LotAlertRow {
    pub queued_at: String,
    pub rule: String,
    pub subject: String,
    pub open: bool,
}

/// Every alert message of a lot, oldest first.
pub fn alerts_of_lot(conn: &Connection, lot: &str) -> Result<Vec<LotAlertRow>> {
    let mut stmt = conn.prepare(
        "SELECT o.queued_at, o.rule, o.subject, COALESCE(c.state, o.state) != 'cleared'
         FROM alert_outbox o LEFT JOIN alert_condition c ON c.alert_key = o.alert_key
         WHERE o.lot = ?1 ORDER BY o.id",
    )?;
    let rows = stmt
        .query_map([lot], |r| {
            Ok(LotAlertRow {
                queued_at: r.get(0)?,
                rule: r.get(1)?,
                subject: r.get(2)?,
                open: r.get(3)?,
            })
        })?
        .collect::<std::result::Result<Vec<_>, _>>()?;
    Ok(rows)
}

/// How many alert conditions of a lot are open.
pub fn open_count(conn: &Connection, lot: &str) -> Result<u32> {
    Ok(conn.query_row(
        "SELECT COUNT(*) FROM alert_condition WHERE lot = ?1 AND state != 'cleared'",
        [lot],
        |r| r.get(0),
    )?)
}

/// One alert condition as the `alerts` listing shows it.
#[derive(Debug, Clone, PartialEq)]
pub struct ConditionRow {
    /// The condition's row id: a short, stable handle for `ack` and `close`.
    pub id: i64,
    pub key: String,
    pub rule: String,
    pub lot: String,
    pub state: AlertState,
    pub severity: Severity,
    pub episode: i64,
    /// When the current episode's first message was queued (RFC 3339 UTC).
    pub since: String,
    pub changed_at: String,
    /// The newest message's subject.
    pub subject: String,
}

/// Every alert condition (cleared ones too), most severe first.
pub fn conditions(conn: &Connection) -> Result<Vec<ConditionRow>> {
    let mut st = conn.prepare(
        "SELECT c.rowid, c.alert_key, c.rule, c.lot, c.state, c.severity, c.episode, \
                COALESCE((SELECT MIN(o.queued_at) FROM alert_outbox o \
                          WHERE o.alert_key = c.alert_key AND o.episode = c.episode), \
                         c.changed_at), \
                c.changed_at, \
                COALESCE((SELECT o.subject FROM alert_outbox o WHERE o.alert_key = c.alert_key \
                          ORDER BY o.id DESC LIMIT 1), '') \
         FROM alert_condition c \
         ORDER BY c.state = 'cleared', c.severity DESC, c.changed_at DESC",
    )?;
    let rows = st.query_map([], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
            r.get::<_, String>(3)?,
            r.get::<_, String>(4)?,
            r.get::<_, i64>(5)?,
            r.get::<_, i64>(6)?,
            r.get::<_, String>(7)?,
            r.get::<_, String>(8)?,
            r.get::<_, String>(9)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (id, key, rule, lot, state, sev, episode, since, changed_at, subject) = row?;
        let (state, severity) = parse_state(&key, &state, sev)?;
        out.push(ConditionRow {
            id,
            key,
            rule,
            lot,
            state,
            severity,
            episode,
            since,
            changed_at,
            subject,
        });
    }
    Ok(out)
}

/// One condition by its id (digits) or its key.
pub fn condition(conn: &Connection, id_or_key: &str) -> Result<Option<ConditionRow>> {
    let id: Option<i64> = id_or_key.trim().parse().ok();
    Ok(conditions(conn)?
        .into_iter()
        .find(|c| Some(c.id) == id || c.key == id_or_key))
}

/// A person's action on an alert, as its event recorded it.
#[derive(Debug, Clone, PartialEq)]
pub struct ActionRow {
    pub seq: i64,
    pub at: String,
    pub actor: String,
    pub alert_key: String,
    pub episode: i64,
    pub action: String,
    pub reason: String,
}

/// Every acknowledgement and closing, oldest first, read from the audit trail itself.
pub fn actions(conn: &Connection) -> Result<Vec<ActionRow>> {
    let mut st = conn.prepare(
        "SELECT seq, at, actor, payload FROM events WHERE kind = 'alert-action' ORDER BY seq",
    )?;
    let rows = st.query_map([], |r| {
        Ok((
            r.get::<_, i64>(0)?,
            r.get::<_, String>(1)?,
            r.get::<_, String>(2)?,
            r.get::<_, String>(3)?,
        ))
    })?;
    let mut out = Vec::new();
    for row in rows {
        let (seq, at, actor, payload) = row?;
        if let Ok(crate::model::Payload::AlertAction {
            alert_key,
            episode,
            action,
            reason,
        }) = serde_json::from_str(&payload)
        {
            out.push(ActionRow {
                seq,
                at,
                actor,
                alert_key,
                episode,
                action,
                reason,
            });
        }
    }
    Ok(out)
}

/// Keys of the file notices (quarantine alerts) whose condition is still open.
pub fn open_file_notices(conn: &Connection) -> Result<Vec<String>> {
    let mut st = conn.prepare(
        "SELECT alert_key FROM alert_condition WHERE rule = 'quarantine' AND state <> 'cleared'",
    )?;
    let keys = st.query_map([], |r| r.get::<_, String>(0))?;
    Ok(keys.collect::<rusqlite::Result<Vec<_>>>()?)
}
