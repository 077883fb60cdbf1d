//! Appending events to the audit trail, each linked to the one before it by
//! [`crate::model::chain`], in the caller's transaction.

use rusqlite::Transaction;

use super::Result;
use crate::model::Payload;
use crate::model::chain::{GENESIS, canonical, event_hash};

/// Append one event in the caller's transaction and return its sequence number.
pub fn append(
    tx: &Transaction<'_>,
    at: &str,
    actor: &str,
    subject: &str,
    payload: &Payload,
) -> Result<i64> {
    append_encoded(tx, at, actor, subject, payload.kind(), &canonical(payload)?)
}

/// [`append`] for a payload already in its canonical encoding (`body`, of kind `kind`).
pub fn append_encoded(
    tx: &Transaction<'_>,
    at: &str,
    actor: &str,
    subject: &str,
    kind: &str,
    body: &str,
) -> Result<i64> {
    append_after(
        tx,
        &mut ChainHead::default(),
        at,
        actor,
        subject,
        kind,
        body,
    )
}

/// The newest event (sequence number and hash) as one writer transaction last saw it, so
/// that a transaction appending many events reads it from the database once.
///
/// Only valid while every event of the transaction goes through it; an event appended
/// past it would make the next append reuse a sequence number, which the primary key of
/// `events` refuses (an error, never a forked chain).
#[derive(Debug, Default, Clone)]
pub struct ChainHead(Option<(i64, String)>);

/// [`append_encoded`] continuing from `head`, which it reads when unknown and moves on.
pub fn append_after(
    tx: &Transaction<'_>,
    head: &mut ChainHead,
    at: &str,
    actor: &str,
    subject: &str,
    kind: &str,
    body: &str,
) -> Result<i64> {
    let mut insert = tx.prepare_cached(INSERT_EVENT)?;
    append_prepared(tx, &mut insert, head, at, actor, subject, kind, body)
}

/// The statement that appends an event, for [`append_prepared`].
pub const INSERT_EVENT: &str =
    "INSERT INTO events(seq, at, actor, kind, subject, payload, prev_hash, hash)
     VALUES (?1, ?2, ?3, ?4, ?5, ?6, ?7, ?8)";

/// [`append_after`] through `insert`, [`INSERT_EVENT`] prepared once by a writer that
/// appends an event for every file of a backfill.
#[allow(clippy::too_many_arguments)]
pub fn append_prepared(
    tx: &Transaction<'_>,
    insert: &mut rusqlite::Statement<'_>,
    head: &mut ChainHead,
    at: &str,
    actor: &str,
    subject: &str,
    kind: &str,
    body: &str,
) -> Result<i64> {
    let (last, prev) = match head.0.take() {
        Some(h) => h,
        None => tx
            .prepare_cached("SELECT seq, hash FROM events ORDER BY seq DESC LIMIT 1")?
            .query_row([], |r| Ok((r.get::<_, i64>(0)?, r.get(1)?)))
            .or_else(|e| match e {
                rusqlite::Error::QueryReturnedNoRows => Ok((0, GENESIS.to_string())),
                e => Err(e),
            })?,
    };
    let seq = last + 1;
    let hash = event_hash(&prev, seq, at, actor, kind, subject, body);
    insert.execute(rusqlite::params![
        seq, at, actor, kind, subject, body, prev, hash
    ])?;
    head.0 = Some((seq, hash));
    Ok(seq)
}
