//! Appending events to the audit trail, each linked to the one before it by
//! [`crate::model::chain`], in the caller's transaction; the chain's keying.
//!
//! A database whose chain is keyed is written only by a process that has given its key
//! with [`use_key`]: an append to a keyed chain without it is refused, never linked by
//! the plain rule. The key is held in memory, by database file, and never written here.

use std::collections::HashMap;
use std::sync::{Arc, Mutex, PoisonError};

use rusqlite::{Connection, OptionalExtension, Transaction};

use super::{Result, StoreError};
use crate::model::Payload;
use crate::model::chain::{ChainKey, GENESIS, Head, KEYED_KIND, canonical, key_proof, link};

/// The chain keys given by this process, by database file.
static KEYS: Mutex<Option<HashMap<String, Arc<ChainKey>>>> = Mutex::new(None);

fn db_name(conn: &Connection) -> String {
    conn.path().unwrap_or_default().to_string()
}

/// Link every later event written to `conn`'s database file by this process with `key`.
pub fn use_key(conn: &Connection, key: ChainKey) {
    let mut keys = KEYS.lock().unwrap_or_else(PoisonError::into_inner);
    keys.get_or_insert_with(HashMap::new)
        .insert(db_name(conn), Arc::new(key));
}

/// The key this process gave for `conn`'s database file.
fn key_for(conn: &Connection) -> Option<Arc<ChainKey>> {
    let keys = KEYS.lock().unwrap_or_else(PoisonError::into_inner);
    keys.as_ref().and_then(|k| k.get(&db_name(conn)).cloned())
}

/// The chain's keying as stored: the switch's event (0: keyed from the first event) and
/// the key proof; None while the chain is plain.
pub fn keying(conn: &Connection) -> Result<Option<(i64, String)>> {
    Ok(conn
        .query_row(
            "SELECT switch_seq, key_proof FROM chain_keying WHERE id = 1",
            [],
            |r| Ok((r.get(0)?, r.get(1)?)),
        )
        .optional()?)
}

/// The newest event, if any.
pub fn head(conn: &Connection) -> Result<Option<Head>> {
    Ok(conn
        .query_row(
            "SELECT seq, hash FROM events ORDER BY seq DESC LIMIT 1",
            [],
            |r| {
                Ok(Head {
                    seq: r.get(0)?,
                    hash: r.get(1)?,
                })
            },
        )
        .optional()?)
}

/// Key the chain of a database whose chain is plain: an empty chain is keyed from its
/// first event; a chain holding plain events gets a `chain-keyed` event, linked by the
/// plain rule, after which links are keyed. Returns the switch's event (0 for none).
pub fn start_keying(tx: &Transaction<'_>, key: &ChainKey, at: &str, actor: &str) -> Result<i64> {
    let (switch_seq, proof) = match head(tx)? {
        None => (0, key_proof(key, GENESIS)),
        Some(h) => {
            let proof = key_proof(key, &h.hash);
            let payload = Payload::ChainKeyed {
                rule: "HMAC-SHA-256 under the chain key".into(),
                key_proof: proof.clone(),
            };
            let body = super::site::stamp(tx, &canonical(&payload)?).into_owned();
            let seq = h.seq + 1;
            let hash = link(None, &h.hash, seq, at, actor, KEYED_KIND, "chain", &body);
            tx.execute(
                INSERT_EVENT,
                rusqlite::params![seq, at, actor, KEYED_KIND, "chain", body, h.hash, hash],
            )?;
            APPENDS.fetch_add(1, std::sync::atomic::Ordering::SeqCst);
            (seq, proof)
        }
    };
    tx.execute(
        "INSERT INTO chain_keying(id, switch_seq, key_proof) VALUES (1, ?1, ?2)",
        rusqlite::params![switch_seq, proof],
    )?;
    Ok(switch_seq)
}

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
///
/// Every append counts itself in [`APPENDS`]; a head kept from before another append (the
/// outbox's events, written between a backfill's file events) is read again, not reused.
#[derive(Debug, Default, Clone)]
pub struct ChainHead(Option<(i64, String, u64)>);

/// Appends made by this process, so a kept [`ChainHead`] knows when it went stale.
static APPENDS: std::sync::atomic::AtomicU64 = std::sync::atomic::AtomicU64::new(0);

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
    let kept = head
        .0
        .take()
        .filter(|h| h.2 == APPENDS.load(std::sync::atomic::Ordering::SeqCst));
    let (last, prev) = match kept {
        Some((seq, hash, _)) => (seq, hash),
        None => tx
            .prepare_cached("SELECT seq, hash FROM events ORDER BY seq DESC LIMIT 1")?
            .query_row([], |r| Ok((r.get::<_, i64>(0)?, r.get(1)?)))
            .or_else(|e| match e {
                rusqlite::Error::QueryReturnedNoRows => Ok((0, GENESIS.to_string())),
                e => Err(e),
            })?,
    };
    let seq = last + 1;
    let key = key_for(tx);
    if key.is_none() && keying(tx)?.is_some() {
        return Err(StoreError::Invalid(
            "the audit chain is keyed and this process has not loaded the chain key: \
             nothing written"
                .into(),
        ));
    }
    let body = &*super::site::stamp(tx, body);
    let hash = link(key.as_deref(), &prev, seq, at, actor, kind, subject, body);
    insert.execute(rusqlite::params![
        seq, at, actor, kind, subject, body, prev, hash
    ])?;
    let count = APPENDS.fetch_add(1, std::sync::atomic::Ordering::SeqCst) + 1;
    head.0 = Some((seq, hash, count));
    Ok(seq)
}
