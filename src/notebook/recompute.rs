//! Recomputing lots when their records change: metrics, fits and alerts, stored in the
//! caller's transaction.
//!
//! The service recomputes the lots its files touched in the same transaction as their
//! records (files that settled together share one). A backfill recomputes once after its last group; its groups list the
//! lots they touched (`lots_to_recompute`), so if it is interrupted before that,
//! [`recompute_stale`] heals it at the next start from that list alone. Each recompute
//! also keeps the lot's state (its `lots` line) current, for the reads; after an engine
//! upgrade or a change of analysis settings the next start recomputes every lot once.

use std::collections::{BTreeMap, BTreeSet};

use super::lots::{LotState, lot_line, lot_state};
use crate::config::Config;
use crate::fit;
use crate::model::time::now_utc;
use crate::store::{self, Connection, Result, Transaction};

/// Recompute metrics, fits and alerts of the given lots, in the caller's transaction.
pub fn recompute_lots(
    tx: &Transaction<'_>,
    cfg: &Config,
    lots: &BTreeSet<String>,
    _actor: &str,
) -> Result<()> {
    for lot in lots {
        recompute_lot(
            tx,
            cfg,
            lot,
            store::lots::newest_seq_of(tx, lot)?,
            None,
            Raise::Always,
        )?;
    }
    Ok(())
}

/// [`recompute_lots`] after a person's entry (a correction, an exclusion): every message
/// this queues (a clearing, a change of severity) names the entry — `cause`, e.g. "event
/// #57, exclusion of batch KV4-K-010 by a.chemist: feed drum contaminated" — so nobody
/// reads a silent "cleared".
pub fn recompute_lots_because(
    tx: &Transaction<'_>,
    cfg: &Config,
    lots: &BTreeSet<String>,
    cause: &str,
) -> Result<()> {
    for lot in lots {
        recompute_lot(
            tx,
            cfg,
            lot,
            store::lots::newest_seq_of(tx, lot)?,
            Some(cause),
            Raise::Always,
        )?;
    }
    Ok(())
}

/// Whether a recompute raises the alerts of the state it computes.
#[derive(Debug, Clone, Copy)]
enum Raise {
    /// A person's entry (registration, correction, exclusion): always raised.
    Always,
    /// Records from files: only lots whose newest batch started at or after this time
    /// raise alerts; older ones are history (see [`recompute_backfill`]). `None`: every
    /// lot.
    CurrentFrom(Option<chrono::NaiveDateTime>),
}

/// The recompute of lots that files touched (a backfill after its last group, the
/// service after each transaction), each with the newest event written for it (`None`:
/// looked up). Files may bring history rather than news: a lot whose newest batch started
/// more than `alerts.backfill_history_days` before the newest batch the store records is
/// history. Its fit and state are stored and shown like any lot's, its alerts are not
/// raised (no mail for a lot finished years ago); a newer batch of it raises them as usual,
/// and so does a person's entry.
pub fn recompute_backfill(
    tx: &Transaction<'_>,
    cfg: &Config,
    lots: &BTreeMap<String, Option<i64>>,
) -> Result<()> {
    let from = history_cutoff(tx, cfg)?;
    for (lot, after) in lots {
        let after = match after {
            Some(a) => *a,
            None => store::lots::newest_seq_of(tx, lot)?,
        };
        recompute_lot(tx, cfg, lot, after, None, Raise::CurrentFrom(from))?;
    }
    Ok(())
}

/// The batch start before which a lot is history: `alerts.backfill_history_days` before
/// the newest batch the store records (`None`: no batch, or the setting switched off).
/// Backfills raise no alerts for such lots and the digest counts them without listing them.
pub(crate) fn history_cutoff(
    conn: &store::Connection,
    cfg: &Config,
) -> store::Result<Option<chrono::NaiveDateTime>> {
    let newest = store::lots::newest_batch_start(conn)?;
    Ok(newest
        .as_deref()
        .and_then(crate::model::time::parse_local)
        .and_then(|t| {
            let days = cfg.alerts.backfill_history_days;
            (days.is_finite() && days >= 0.0)
                .then(|| t - chrono::Duration::seconds((days * 86_400.0) as i64))
        }))
}

/// Recompute one lot whose records go up to event `after`: its fit and its state are
/// stored, and the alerts of that state raised as `raise` says.
fn recompute_lot(
    tx: &Transaction<'_>,
    cfg: &Config,
    lot: &str,
    after: i64,
    cause: Option<&str>,
    raise: Raise,
) -> Result<()> {
    if recompute_pending(tx, cfg, lot, after)? {
        return Ok(());
    }
    let state = match recompute_streamed(tx, cfg, lot, after)? {
        Some(state) => state,
        None => {
            let state = lot_state(tx, cfg, lot)?;
            super::export::store_figures(tx, &state, after)?;
            state
        }
    };
    let fingerprint = cfg.analysis_fingerprint();
    let now = now_utc();
    let json = match &state.analysis {
        Some(a) => serde_json::to_string(a)?,
        None => "null".into(),
    };
    let model = state
        .analysis
        .as_ref()
        .and_then(|a| a.chosen)
        .map(|m| m.id());
    // Pending (nobody registered the lot): nothing to fit and no alert to raise; the
    // empty fit still records what the lot's records were when looked at.
    store::lots::store_fit(
        tx,
        lot,
        after,
        &state.basis,
        model,
        &json,
        (fit::ENGINE_VERSION, &fingerprint),
        &now,
    )?;
    let line = serde_json::to_string(&lot_line(&state))?;
    let snapshot = super::alerts::snapshot(cfg, &state)
        .map(|s| serde_json::to_string(&s))
        .transpose()?;
    let made = store::lots::StateMade {
        after_seq: after,
        engine_version: fit::ENGINE_VERSION,
        config_sha256: &fingerprint,
    };
    store::lots::store_state(tx, lot, made, &now, (&line, snapshot.as_deref()))?;
    super::lot_list::keep_printed_line(tx, lot, &line)?;
    if state.record.is_none() {
        return Ok(());
    }
    let current = match raise {
        Raise::Always | Raise::CurrentFrom(None) => true,
        Raise::CurrentFrom(Some(from)) => state.totals().newest_start().is_none_or(|t| t >= from),
    };
    if current {
        super::alerts::raise(tx, cfg, &state, cause)?;
    } else {
        tracing::debug!(lot, "backfilled history: state stored, no alert raised");
    }
    Ok(())
}

/// A registered lot of very many cycles ([`super::large_lot::STREAM_FROM`] or more),
/// streamed from the store with its figures stored as its cycles come; `None` for any
/// other lot (its state is held whole).
fn recompute_streamed(
    tx: &Transaction<'_>,
    cfg: &Config,
    lot: &str,
    after: i64,
) -> Result<Option<LotState>> {
    let mut figures = None;
    let from = super::large_lot::STREAM_FROM;
    let state = super::large_lot::streamed_state(tx, cfg, lot, from, |state, c| {
        let w = match figures.as_mut() {
            Some(w) => w,
            None => figures.insert(super::export::FiguresWriter::begin(tx, state, after)?),
        };
        w.cycle(state, c)
    })?;
    let Some(state) = state else {
        return Ok(None);
    };
    let figures = match figures {
        Some(w) => w,
        None => super::export::FiguresWriter::begin(tx, &state, after)?,
    };
    figures.finish(&state)?;
    Ok(Some(state))
}

/// Recompute a lot nobody registered, streaming its cycles from the store: it has no
/// analysis and raises no alert, so each cycle is needed only for its figures and its
/// share of the lot's flags, and a lot of 200,000 cycles (one large export) is stored in
/// the memory of one cycle. What it stores is what [`recompute_lot`] stores from the
/// lot's whole state (a test compares them). False when the lot is registered.
fn recompute_pending(tx: &Transaction<'_>, cfg: &Config, lot: &str, after: i64) -> Result<bool> {
    let mut figures = None;
    let streamed = super::lots::pending_state_streamed(tx, cfg, lot, |state, c| {
        let w = match figures.as_mut() {
            Some(w) => w,
            None => figures.insert(super::export::FiguresWriter::begin(tx, state, after)?),
        };
        w.cycle(state, c)
    })?;
    let Some((state, count)) = streamed else {
        return Ok(false);
    };
    let figures = match figures {
        Some(w) => w,
        None => super::export::FiguresWriter::begin(tx, &state, after)?,
    };
    figures.finish(&state)?;
    let fingerprint = cfg.analysis_fingerprint();
    let now = now_utc();
    store::lots::store_fit(
        tx,
        lot,
        after,
        &state.basis,
        None,
        "null",
        (fit::ENGINE_VERSION, &fingerprint),
        &now,
    )?;
    let mut line = lot_line(&state);
    line.cycles = count;
    let made = store::lots::StateMade {
        after_seq: after,
        engine_version: fit::ENGINE_VERSION,
        config_sha256: &fingerprint,
    };
    let line = serde_json::to_string(&line)?;
    store::lots::store_state(tx, lot, made, &now, (&line, None))?;
    super::lot_list::keep_printed_line(tx, lot, &line)?;
    Ok(true)
}

/// Lots whose records changed with no recompute since (an interrupted backfill): the
/// groups of a backfill list the lots they touch, and the recompute takes them off.
pub fn stale_lots(conn: &Connection) -> Result<BTreeSet<String>> {
    store::lots::lots_to_recompute(conn)
}

/// Recompute every stale lot in one transaction: those a backfill left listed, and those
/// whose stored state another engine version or other analysis settings made (so that
/// after an upgrade the reads find current states instead of recomputing per read).
pub fn recompute_stale(conn: &mut Connection, cfg: &Config, _actor: &str) -> Result<usize> {
    // Current states whose printed `lots --json` entry is missing (a store from before
    // they were kept) get one: outdated states are left to the recompute below.
    let printed = super::lot_list::fill_printed_lines(conn, cfg)?;
    if printed > 0 {
        tracing::info!(lots = printed, "kept the printed entries of the lot list");
    }
    let mut stale = stale_lots(conn)?;
    stale.extend(store::lots::outdated_states(
        conn,
        (fit::ENGINE_VERSION, &cfg.analysis_fingerprint()),
    )?);
    if stale.is_empty() {
        return Ok(0);
    }
    let tx = store::immediate(conn)?;
    let lots = stale.into_iter().map(|l| (l, None)).collect();
    recompute_backfill(&tx, cfg, &lots)?;
    tx.commit()?;
    Ok(lots.len())
}
