//! The audit chain: every event carries the SHA-256 of the one before it over a canonical
//! encoding of its content, and `verify` replays the events to prove the stored records
//! are exactly what the events wrote.
//!
//! Canonical encoding: the payload is serialised to JSON with fields in the payload types'
//! declaration order and numbers in their shortest round-trip form; the hash input is
//! `prev_hash \n seq \n at \n actor \n kind \n subject \n payload`.

pub mod payload;
pub mod verify;

use rusqlite::Transaction;
use sha2::{Digest, Sha256};

pub use payload::Payload;
pub use verify::{Finding, VerifyReport, verify};

use crate::store::Result;

/// The `prev_hash` of the first event.
pub const GENESIS: &str = "0000000000000000000000000000000000000000000000000000000000000000";

/// Current time, RFC 3339 UTC with milliseconds. The only clock the store reads.
pub fn now_utc() -> String {
    chrono::Utc::now().to_rfc3339_opts(chrono::SecondsFormat::Millis, true)
}

/// Canonical JSON of a payload: the payload types' fields in declaration order, numbers in
/// their shortest round-trip form. Deterministic for a given build; `verify` hashes the
/// stored text itself, so it never depends on re-encoding.
pub fn canonical(payload: &Payload) -> Result<String> {
    Ok(serde_json::to_string(payload)?)
}

/// SHA-256 of one event, hex.
pub fn event_hash(
    prev_hash: &str,
    seq: i64,
    at: &str,
    actor: &str,
    kind: &str,
    subject: &str,
    payload: &str,
) -> String {
    let mut h = Sha256::new();
    for part in [
        prev_hash,
        &seq.to_string(),
        at,
        actor,
        kind,
        subject,
        payload,
    ] {
        h.update(part.as_bytes());
        h.update(b"\n");
    }
    hex_lower(&h.finalize())
}

/// Lower-case hex of bytes, as `hex::encode` writes it, byte by byte rather than through
/// an iterator of chars (a backfill writes two of these per file).
pub fn hex_lower(bytes: &[u8]) -> String {
    const DIGITS: &[u8; 16] = b"0123456789abcdef";
    let mut s = String::with_capacity(bytes.len() * 2);
    for b in bytes {
        s.push(char::from(DIGITS[usize::from(b >> 4)]));
        s.push(char::from(DIGITS[usize::from(b & 15)]));
    }
    s
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

/// Who is acting: the configured name, else the OS user, else "unknown".
pub fn actor(configured: Option<&str>) -> String {
    if let Some(name) = configured.filter(|n| !n.trim().is_empty()) {
        return name.trim().to_string();
    }
    std::env::var("USER")
        .or_else(|_| std::env::var("LOGNAME"))
        .ok()
        .filter(|u| !u.is_empty())
        .or_else(os_user)
        .unwrap_or_else(|| "unknown".to_string())
}

/// The name of the process's real user from /proc and /etc/passwd (services often run
/// without USER in their environment).
fn os_user() -> Option<String> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let uid = status
        .lines()
        .find_map(|l| l.strip_prefix("Uid:"))?
        .split_whitespace()
        .next()?
        .to_string();
    let passwd = std::fs::read_to_string("/etc/passwd").ok()?;
    passwd.lines().find_map(|l| {
        let mut f = l.split(':');
        let name = f.next()?;
        let _pw = f.next()?;
        (f.next()? == uid).then(|| name.to_string())
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn hex_lower_writes_what_the_hex_crate_writes() {
        let all: Vec<u8> = (0..=255).collect();
        assert_eq!(hex_lower(&all), hex::encode(&all));
        assert_eq!(hex_lower(&[]), "");
    }
}
