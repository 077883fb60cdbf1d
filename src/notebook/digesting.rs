//! The managers' digest: gather what it shows and queue it. Lots that are history (no
//! batch since the cut-off the backfill uses, no open alert, nothing changed in the
//! period) are counted, not listed: the digest's cost and length follow the lots in use,
//! not a decade of finished ones.

use std::collections::BTreeSet;

use super::error::Result;
use crate::alert::{self as digest, LotSnapshot};
use crate::config::Config;
use crate::model::time::{LOCAL_FORMAT, format_ts};
use crate::store::{self, outbox};

/// Compose the managers' digest for the period since the last one and queue it; returns
/// its subject.
pub fn queue_digest(cfg: &Config) -> Result<String> {
    // Queuing a message appends its event: open with the chain key loaded.
    let mut conn = super::chain::open_writer(cfg)?;
    let now = chrono::Utc::now();
    let from = outbox::last_digest(&conn)?.unwrap_or_else(|| now - chrono::Duration::days(7));
    let open = outbox::open_alerts(&conn)?;
    let changes = outbox::changes_since(&conn, &format_ts(from))?;
    let seen = open.iter().map(|a| a.lot.clone());
    let seen = seen.chain(changes.iter().map(|c| c.lot.clone()));
    let index = store::lots::LotIndex::read(&conn)?;
    let (listed, cutoff) = match lots_in_view(&conn, cfg, &index, seen)? {
        Some((set, cutoff)) => (Some(set), Some(cutoff)),
        None => (None, None),
    };
    let signoffs = super::signoffs::sign_off_states(&conn)?;
    let shown = current_snapshots(&conn, cfg, &index, listed.as_ref())?;
    let mut lots = Vec::new();
    for (lot, snap) in shown.listed {
        let signoff = signoffs.get(&lot).map(|s| match &s.by {
            Some(m) => format!("{} ({})", s.state.as_str(), m.signer_or_unnamed()),
            None => s.state.as_str().to_string(),
        });
        lots.push(digest::DigestLot { snap, signoff });
    }
    let period = digest::DigestPeriod {
        from,
        to: now,
        chain_head: store::events::head(&conn)?.map(|h| h.to_string()),
        zone: cfg.zone(),
    };
    let msg = digest::compose_digest(&digest::DigestInput {
        lots: &lots,
        pending_lots: shown.pending,
        changes: &changes,
        open: &open,
        period: &period,
        recipients: &cfg.alerts.recipients.managers,
        resting: cutoff.map(|c| digest::RestingLots {
            count: shown.resting,
            before: c.format("%Y-%m-%d").to_string(),
        }),
    });
    let tx = conn.transaction().map_err(store::StoreError::from)?;
    let key = format!("digest|{}", format_ts(now));
    outbox::enqueue_message(&tx, &key, &msg, &format_ts(now))?;
    tx.commit().map_err(store::StoreError::from)?;
    Ok(msg.subject)
}

/// The lots a reader of current lots sees in full: those in use (a batch since the history
/// cut-off, or none yet) and `also` (lots with open alerts, say), with the cut-off; `None`
/// when there is no cut-off (every lot is in view).
pub(crate) fn lots_in_view(
    conn: &store::Connection,
    cfg: &Config,
    lots: &store::lots::LotIndex,
    also: impl Iterator<Item = String>,
) -> store::Result<Option<(BTreeSet<String>, chrono::NaiveDateTime)>> {
    let Some(cutoff) = super::recompute::history_cutoff(conn, cfg)? else {
        return Ok(None);
    };
    let mut set = store::lots::lots_batched_since(conn, &cutoff.format(LOCAL_FORMAT).to_string())?;
    set.extend(lots.without_cycles().cloned());
    set.extend(also);
    Ok(Some((set, cutoff)))
}

/// The digest's lots: those listed with their snapshots, how many nobody registered yet
/// and how many are only counted.
struct Shown {
    listed: Vec<(String, LotSnapshot)>,
    pending: usize,
    resting: usize,
}

/// Each listed lot's alert-rules snapshot as it stands: stored by the lot's last
/// recompute, computed here only where no usable one is stored (as `lots` reads its
/// lines). Dates are worked out as of today. `listed: None` lists every lot; a lot outside
/// it is counted, as pending when nobody registered it, else as resting, and its stored
/// state is not read.
fn current_snapshots(
    conn: &store::Connection,
    cfg: &Config,
    index: &store::lots::LotIndex,
    listed: Option<&BTreeSet<String>>,
) -> store::Result<Shown> {
    let version = (crate::fit::ENGINE_VERSION, cfg.analysis_fingerprint());
    let version = (version.0, version.1.as_str());
    let today = super::lots::today(cfg);
    let mut shown = Shown {
        listed: Vec::new(),
        pending: 0,
        resting: 0,
    };
    for lot in index.names() {
        if listed.is_some_and(|set| !set.contains(&lot)) {
            if index.registered.contains(&lot) {
                shown.resting += 1;
            } else {
                shown.pending += 1;
            }
            continue;
        }
        let stored =
            store::lots::current_state_of(conn, version, store::lots::StatePart::Snapshot, &lot)?;
        let kept = match stored {
            Some(None) => Some(None),
            Some(Some(json)) => serde_json::from_str::<LotSnapshot>(&json).ok().map(Some),
            None => None,
        };
        let snap = match kept {
            Some(mut snap) => {
                if let Some(d) = snap
                    .as_mut()
                    .and_then(|s| s.forecast.as_mut())
                    .and_then(|f| f.dates.as_mut())
                    .filter(|d| d.as_of.is_some())
                {
                    d.as_of = Some(today.clone());
                }
                snap
            }
            None => super::alerts::snapshot(cfg, &super::lots::lot_state(conn, cfg, &lot)?),
        };
        match snap {
            Some(s) => shown.listed.push((lot, s)),
            None => shown.pending += 1,
        }
    }
    Ok(shown)
}
