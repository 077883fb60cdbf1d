//! The outbox and the alert conditions replayed from their events (`alert-queued`,
//! `mail-outcome`, `outbox-chained`) and compared with the stored rows, column by column.
//!
//! Rows queued before the outbox was in the chain (below the `outbox-chained` event's
//! first row) are counted, not replayed; a condition no event after the switch-over
//! wrote is checked against its messages in the outbox, as before the switch-over.

use std::collections::BTreeMap;

use serde::Serialize;

use super::check::{Finding, diff_rows, push};
use crate::model::event::{DeliveryState, QueuedMessage};
use crate::store::outbox::text_sha256;
use crate::store::replay::{ConditionRow, OutboxRow};
use crate::store::{self, Connection, Result};

/// The columns of an outbox row an `alert-queued` event fixes.
#[derive(Debug, Clone, PartialEq, Serialize)]
struct QueuedCols {
    alert_key: String,
    rule: String,
    lot: String,
    episode: i64,
    state: String,
    severity: i64,
    message_id: String,
    in_reply_to: Option<String>,
    subject: String,
    body_text: String,
    body_html: String,
    recipients: String,
    queued_at: String,
}

/// The delivery columns of an outbox row.
#[derive(Debug, Clone, PartialEq, Serialize)]
struct DeliveryCols {
    attempts: i64,
    next_attempt_at: Option<String>,
    last_error: Option<String>,
    delivered_at: Option<String>,
    server_reply: Option<String>,
}

/// What the events say of one outbox row: the queued columns if the row was queued in
/// the replayed stretch, the delivery columns if anything there set them.
#[derive(Debug, Default)]
struct Expected {
    queued: Option<(QueuedCols, i64)>,
    delivery: Option<(DeliveryCols, i64)>,
    message_id: Option<String>,
}

/// The outbox's events met in the walk.
#[derive(Debug, Default)]
pub(super) struct OutboxReplay {
    rows: BTreeMap<i64, Expected>,
    conditions: BTreeMap<String, (ConditionRow, i64)>,
    /// The `outbox-chained` event: (seq, first row in the chain, rows before it).
    marker: Option<(i64, i64, i64)>,
    /// The first outbox event met before any marker (a finding unless the marker
    /// precedes the replayed stretch).
    unmarked: Option<i64>,
}

impl OutboxReplay {
    pub(super) fn marker(&mut self, out: &mut Vec<Finding>, seq: i64, first: i64, legacy: i64) {
        if let Some((earlier, _, _)) = self.marker {
            push(
                out,
                "events",
                seq,
                "kind",
                "outbox-chained",
                format!("one switch-over only (the first is event {earlier})"),
            );
            return;
        }
        self.marker = Some((seq, first, legacy));
    }

    fn seen(&mut self, seq: i64) {
        if self.marker.is_none() && self.unmarked.is_none() {
            self.unmarked = Some(seq);
        }
    }

    pub(super) fn queued(&mut self, seq: i64, q: QueuedMessage) {
        self.seen(seq);
        if let Some(thread) = &q.thread_message_id {
            let row = ConditionRow {
                rule: q.rule.clone(),
                lot: q.lot.clone(),
                state: q.state.clone(),
                severity: q.severity,
                episode: q.episode,
                thread_message_id: thread.clone(),
                changed_at: q.queued_at.clone(),
            };
            self.conditions.insert(q.alert_key.clone(), (row, seq));
        }
        let Some(id) = q.outbox_id else { return };
        let delivery = DeliveryCols {
            attempts: 0,
            next_attempt_at: q.next_attempt_at.clone(),
            last_error: q.last_error.clone(),
            delivered_at: None,
            server_reply: None,
        };
        let cols = QueuedCols {
            recipients: serde_json::to_string(&q.recipients).unwrap_or_default(),
            alert_key: q.alert_key,
            rule: q.rule,
            lot: q.lot,
            episode: q.episode,
            state: q.state,
            severity: q.severity,
            message_id: q.message_id.clone(),
            in_reply_to: q.in_reply_to,
            subject: digest_text(&q.subject_sha256),
            body_text: digest_text(&q.body_text_sha256),
            body_html: digest_text(&q.body_html_sha256),
            queued_at: q.queued_at,
        };
        let e = self.rows.entry(id).or_default();
        e.queued = Some((cols, seq));
        e.delivery = Some((delivery, seq));
        e.message_id = Some(q.message_id);
    }

    pub(super) fn outcome(&mut self, out: &mut Vec<Finding>, seq: i64, d: DeliveryState) {
        self.seen(seq);
        let e = self.rows.entry(d.outbox_id).or_default();
        if let Some(mid) = e.message_id.as_ref().filter(|m| **m != d.message_id) {
            push(
                out,
                "events",
                seq,
                "payload.message_id",
                &d.message_id,
                format!("{mid} (the message queued as outbox row {})", d.outbox_id),
            );
        }
        e.message_id.get_or_insert(d.message_id);
        e.delivery = Some((
            DeliveryCols {
                attempts: d.attempts,
                next_attempt_at: d.next_attempt_at,
                last_error: d.last_error,
                delivered_at: d.delivered_at,
                server_reply: d.server_reply,
            },
            seq,
        ));
    }

    /// Compare with the stored rows: every row and condition when `full`, else only
    /// those the replayed stretch (events after `from`) wrote.
    pub(super) fn compare(
        self,
        conn: &Connection,
        out: &mut Vec<Finding>,
        full: bool,
        from: i64,
    ) -> Result<()> {
        let stored_switch = store::replay::outbox_chain(conn)?;
        self.check_switch(out, stored_switch, from)?;
        let first = match (self.marker, stored_switch) {
            (Some((_, first, _)), _) => first,
            (None, Some((first, _, _))) => first,
            (None, None) => 1,
        };
        if full {
            let legacy = match (self.marker, stored_switch) {
                (Some((_, _, l)), _) | (None, Some((_, l, _))) => l,
                (None, None) => 0,
            };
            let found = store::replay::outbox_rows_before(conn, first)?;
            if found != legacy {
                push(
                    out,
                    "alert_outbox",
                    format!("rows below {first}"),
                    "(count)",
                    found,
                    format!("{legacy} (the rows queued before the outbox was in the chain)"),
                );
            }
        }
        self.compare_rows(conn, out, full, first)?;
        self.compare_conditions(conn, out, full)
    }

    fn check_switch(
        &self,
        out: &mut Vec<Finding>,
        stored: Option<(i64, i64, Option<i64>)>,
        from: i64,
    ) -> Result<()> {
        if let (Some(seq), None) = (self.unmarked, self.marker) {
            let before = stored.and_then(|s| s.2).is_some_and(|m| m <= from);
            if !before {
                push(
                    out,
                    "events",
                    seq,
                    "kind",
                    "an outbox event",
                    "an outbox-chained event before the first outbox event",
                );
            }
        }
        match (self.marker, stored) {
            (Some((seq, first, legacy)), Some(s)) if s != (first, legacy, Some(seq)) => push(
                out,
                "outbox_chain",
                1,
                "(row)",
                format!("first {}, before {}, marker {:?}", s.0, s.1, s.2),
                format!(
                    "first {first}, before {legacy}, marker Some({seq}) (as event {seq} recorded)"
                ),
            ),
            (Some((seq, ..)), None) => push(
                out,
                "outbox_chain",
                1,
                "(row)",
                "missing",
                format!("present (event {seq} switched the outbox to the chain)"),
            ),
            (None, Some((_, _, Some(m)))) if m > from => push(
                out,
                "outbox_chain",
                1,
                "marker_seq",
                m,
                "the seq of an outbox-chained event (there is none there)",
            ),
            _ => {}
        }
        Ok(())
    }

    fn compare_rows(
        &self,
        conn: &Connection,
        out: &mut Vec<Finding>,
        full: bool,
        first: i64,
    ) -> Result<()> {
        if full {
            let mut seen = Vec::new();
            store::replay::for_each_outbox_row(conn, 1, |row| {
                match self.rows.get(&row.id) {
                    Some(e) => compare_row(out, &row, e),
                    None if row.id >= first => push(
                        out,
                        "alert_outbox",
                        row.id,
                        "(row)",
                        "present",
                        "absent (no event queued it)",
                    ),
                    None => {}
                }
                if self.rows.contains_key(&row.id) {
                    seen.push(row.id);
                }
            })?;
            for id in self
                .rows
                .keys()
                .filter(|id| seen.binary_search(id).is_err())
            {
                missing_row(out, *id, &self.rows[id]);
            }
            return Ok(());
        }
        for (id, e) in &self.rows {
            match store::replay::outbox_row(conn, *id)? {
                Some(row) => compare_row(out, &row, e),
                None => missing_row(out, *id, e),
            }
        }
        Ok(())
    }

    fn compare_conditions(
        &self,
        conn: &Connection,
        out: &mut Vec<Finding>,
        full: bool,
    ) -> Result<()> {
        for (key, (expected, seq)) in &self.conditions {
            match store::replay::alert_condition(conn, key)? {
                None => push(
                    out,
                    "alert_condition",
                    key,
                    "(row)",
                    "missing",
                    format!("present (event {seq} wrote it)"),
                ),
                Some(s) => diff_rows(out, "alert_condition", key, &s, expected),
            }
        }
        if full {
            legacy_conditions(conn, out, &self.conditions)?;
        }
        Ok(())
    }
}

fn missing_row(out: &mut Vec<Finding>, id: i64, e: &Expected) {
    let by = e
        .queued
        .as_ref()
        .map_or_else(|| e.delivery.as_ref().map_or(0, |d| d.1), |q| q.1);
    push(
        out,
        "alert_outbox",
        id,
        "(row)",
        "missing",
        format!("present (event {by} wrote it)"),
    );
}

/// How a message's text is compared: by the SHA-256 its event holds.
fn digest_text(sha: &str) -> String {
    format!("text with SHA-256 {sha}")
}

fn compare_row(out: &mut Vec<Finding>, row: &OutboxRow, e: &Expected) {
    let key = row.id.to_string();
    if let Some((q, _)) = &e.queued {
        let stored = QueuedCols {
            alert_key: row.alert_key.clone(),
            rule: row.rule.clone(),
            lot: row.lot.clone(),
            episode: row.episode,
            state: row.state.clone(),
            severity: row.severity,
            message_id: row.message_id.clone(),
            in_reply_to: row.in_reply_to.clone(),
            subject: digest_text(&text_sha256(&row.subject)),
            body_text: digest_text(&text_sha256(&row.body_text)),
            body_html: digest_text(&text_sha256(&row.body_html)),
            recipients: row.recipients.clone(),
            queued_at: row.queued_at.clone(),
        };
        diff_rows(out, "alert_outbox", &key, &stored, q);
    } else if let Some(mid) = e.message_id.as_ref().filter(|m| **m != row.message_id) {
        push(
            out,
            "alert_outbox",
            &key,
            "message_id",
            &row.message_id,
            mid,
        );
    }
    if let Some((d, _)) = &e.delivery {
        let stored = DeliveryCols {
            attempts: row.attempts,
            next_attempt_at: row.next_attempt_at.clone(),
            last_error: row.last_error.clone(),
            delivered_at: row.delivered_at.clone(),
            server_reply: row.server_reply.clone(),
        };
        diff_rows(out, "alert_outbox", &key, &stored, d);
    }
}

/// The conditions no replayed event wrote (queued before the switch-over), each against
/// what its messages in the outbox imply: every change of a condition queues one message
/// in the same transaction, so the newest message of a key gives its state, severity and
/// episode, the message that opened the episode its thread, and its time the condition's.
fn legacy_conditions(
    conn: &Connection,
    findings: &mut Vec<Finding>,
    replayed: &BTreeMap<String, (ConditionRow, i64)>,
) -> Result<()> {
    let mut implied: BTreeMap<String, (ConditionRow, i64)> = BTreeMap::new();
    for m in store::replay::alert_messages(conn)? {
        if replayed.contains_key(&m.alert_key) {
            continue;
        }
        let thread = match implied.get(&m.alert_key) {
            Some((c, _)) if m.state != "open" => c.thread_message_id.clone(),
            _ => m.message_id.clone(),
        };
        let row = ConditionRow {
            rule: m.rule,
            lot: m.lot,
            state: m.state,
            severity: m.severity,
            episode: m.episode,
            thread_message_id: thread,
            changed_at: m.queued_at,
        };
        implied.insert(m.alert_key, (row, m.id));
    }
    let stored: BTreeMap<String, ConditionRow> = store::replay::alert_conditions(conn)?
        .into_iter()
        .filter(|(k, _)| !replayed.contains_key(k))
        .collect();
    for (key, (expected, id)) in &implied {
        match stored.get(key) {
            None => push(
                findings,
                "alert_condition",
                key,
                "(row)",
                "missing",
                format!("present (outbox message {id} records it)"),
            ),
            Some(s) => diff_rows(findings, "alert_condition", key, s, expected),
        }
    }
    for key in stored.keys().filter(|k| !implied.contains_key(*k)) {
        push(
            findings,
            "alert_condition",
            key,
            "(row)",
            "present",
            "absent (no event or outbox message records it)",
        );
    }
    Ok(())
}
