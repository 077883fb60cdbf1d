//! Recomputing lots when their records change: metrics, fits and alerts, stored in the
//! caller's transaction.
//!
//! Single-file ingestion (the service) recomputes the touched lots in the same transaction
//! as the records. A backfill recomputes once after its last group; if it is interrupted
//! before that, [`recompute_stale`] heals it at the next start (a lot whose stored fit is
//! older than its newest record is recomputed).

use std::collections::{BTreeMap, BTreeSet};

use super::lots::{basis, lot_state};
use crate::config::Config;
use crate::fit;
use crate::model::time::now_utc;
use crate::store::{self, Connection, Result, Transaction, records};

/// Recompute metrics, fits and alerts of the given lots, in the caller's transaction.
pub fn recompute_lots(
    tx: &Transaction<'_>,
    cfg: &Config,
    lots: &BTreeSet<String>,
    _actor: &str,
) -> Result<()> {
    for lot in lots {
        recompute_lot(tx, cfg, lot, store::lots::newest_seq_of(tx, lot)?, None)?;
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
        )?;
    }
    Ok(())
}

/// [`recompute_lots`] for lots whose newest event the caller knows (it wrote them under the
/// write lock, with no other writer since): the lookup of each lot's newest event reads a
/// provenance row per cycle of the lot, the larger part of a backfill's closing recompute.
pub fn recompute_lots_after(
    tx: &Transaction<'_>,
    cfg: &Config,
    lots: &BTreeMap<String, i64>,
) -> Result<()> {
    for (lot, after) in lots {
        recompute_lot(tx, cfg, lot, *after, None)?;
    }
    Ok(())
}

/// Recompute one lot whose records go up to event `after`.
fn recompute_lot(
    tx: &Transaction<'_>,
    cfg: &Config,
    lot: &str,
    after: i64,
    cause: Option<&str>,
) -> Result<()> {
    if records::lot(tx, lot)?.is_none() {
        // Pending (nobody registered the lot): nothing to fit and no alert to raise;
        // the empty fit still records what the lot's records were when looked at.
        store::lots::store_fit(
            tx,
            lot,
            after,
            &basis(cfg),
            None,
            "null",
            (fit::ENGINE_VERSION, &cfg.analysis_fingerprint()),
            &now_utc(),
        )?;
        return Ok(());
    }
    let state = lot_state(tx, cfg, lot)?;
    let json = match &state.analysis {
        Some(a) => serde_json::to_string(a)?,
        None => "null".into(),
    };
    let model = state
        .analysis
        .as_ref()
        .and_then(|a| a.chosen)
        .map(|m| m.id());
    store::lots::store_fit(
        tx,
        lot,
        after,
        &state.basis,
        model,
        &json,
        (fit::ENGINE_VERSION, &cfg.analysis_fingerprint()),
        &now_utc(),
    )?;
    super::export::store_figures(tx, &state, after)?;
    super::alerts::raise(tx, cfg, &state, cause)?;
    Ok(())
}

/// Lots whose stored fit is older than their newest record (an interrupted backfill).
pub fn stale_lots(conn: &Connection) -> Result<BTreeSet<String>> {
    let mut out = BTreeSet::new();
    for lot in store::lots::lot_names(conn)? {
        let fitted = store::lots::fitted_after(conn, &lot)?;
        if fitted.is_none_or(|f| f < store::lots::newest_seq_of(conn, &lot).unwrap_or(0)) {
            out.insert(lot);
        }
    }
    Ok(out)
}

/// Recompute every stale lot in one transaction.
pub fn recompute_stale(conn: &mut Connection, cfg: &Config, actor: &str) -> Result<usize> {
    let stale = stale_lots(conn)?;
    if stale.is_empty() {
        return Ok(0);
    }
    let tx = store::immediate(conn)?;
    recompute_lots(&tx, cfg, &stale, actor)?;
    tx.commit()?;
    Ok(stale.len())
}
