//! Lot metrics and fits, recomputed in the same transaction as the records that changed.
use std::collections::BTreeSet;

use crate::config::Config;
use crate::store::Result;

/// Recompute metrics, fits and alerts of the given lots (wired after the fitting merge).
pub fn recompute_lots(
    _tx: &rusqlite::Transaction<'_>,
    _cfg: &Config,
    _lots: &BTreeSet<String>,
    _actor: &str,
) -> Result<()> {
    Ok(())
}

use crate::commands::CmdResult;
use rusqlite::Connection;

/// Lots that need someone's attention (wired after the fitting merge).
pub fn lots_needing_attention(_conn: &Connection, _cfg: &Config) -> Result<Vec<String>> {
    Ok(Vec::new())
}

/// Messages waiting in the outbox (wired after the alert merge).
pub fn outbox_waiting(_conn: &Connection) -> Result<i64> {
    Ok(0)
}

pub fn lots(_cfg: &Config, _json: bool) -> CmdResult {
    Ok(0)
}

pub fn cycles(_cfg: &Config, _lot: &str, _format: &str) -> CmdResult {
    Ok(0)
}
