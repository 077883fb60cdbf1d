//! A lot's family: the population of lots it belongs to, and the prior the earlier lots of
//! that population give a young lot ([`crate::fit::population`]).
//!
//! A lot's population is the lots with the same key: its `family` when registered with
//! one, else its catalyst description; keys are compared after trimming and Unicode
//! lower-casing, and otherwise exactly ("5 % Pd/C" and "5 % pd/c " match, "5% Pd/C" does
//! not). The earlier lots are those that went into service before the lot: by the earliest
//! recorded start of their cycles when both lots have one, else by the first event that
//! recorded one of their cycles (a change of registration does not make a lot younger).
//! Their stored fits are read, not refitted: the prior costs one small read per earlier
//! lot, at most [`MAX_FAMILY_LOTS`] of them, the most recent first.

use crate::config::{Config, Measure};
use crate::fit::population::{MAX_FAMILY_LOTS, MIN_OWN_POINTS, YOUNG_BELOW};
use crate::fit::{FamilyPrior, LotSeries, ModelId, RankEntry};
use crate::model::event::LotRecord;
use crate::store::{self, Connection, Result};

/// The model the family prior is set on.
const PRIOR_MODEL: ModelId = ModelId::FirstOrder;

/// The key that decides a lot's population: the family, else the catalyst description,
/// trimmed and lower-cased.
pub fn population_key(rec: &LotRecord) -> String {
    rec.family
        .as_deref()
        .unwrap_or(&rec.catalyst)
        .trim()
        .to_lowercase()
}

/// Whether a lot that went into service at `a` did so before one at `b`.
fn earlier(a: &(Option<String>, Option<i64>), b: &(Option<String>, Option<i64>)) -> bool {
    match (&a.0, &b.0) {
        (Some(x), Some(y)) => x < y,
        _ => matches!((a.1, b.1), (Some(x), Some(y)) if x < y),
    }
}

/// The prior for `rec`'s lot from the earlier lots of its population, when the lot is
/// young (at least [`MIN_OWN_POINTS`] and fewer than [`YOUNG_BELOW`] fitted cycles) and
/// activity is what is fitted; None otherwise or when no earlier lot has a usable fit.
/// `basis` names what the stored fits must have been made of (activity against cycle, ...).
pub(crate) fn family_prior(
    conn: &Connection,
    cfg: &Config,
    rec: &LotRecord,
    series: &LotSeries,
    basis: &str,
    as_of: Option<i64>,
) -> Result<Option<FamilyPrior>> {
    if cfg.fitting.measure == Measure::Ton {
        return Ok(None);
    }
    let fitted = (0..series.x.len().min(series.y.len()))
        .filter(|&i| {
            series.x[i].is_finite()
                && series.y[i].is_finite()
                && !series.censored.get(i).copied().unwrap_or(false)
        })
        .count();
    if !(MIN_OWN_POINTS..YOUNG_BELOW).contains(&fitted) {
        return Ok(None);
    }
    let as_of = as_of.unwrap_or(i64::MAX);
    let key = population_key(rec);
    let all = store::lots::service_starts(conn, as_of)?;
    let start = |s: &store::lots::ServiceStart| (s.first_started.clone(), s.first_seq);
    let Some(mine) = all.iter().find(|s| s.lot == rec.lot).map(start) else {
        return Ok(None);
    };
    let mut members = Vec::new();
    for s in &all {
        let their = s
            .family
            .as_deref()
            .unwrap_or(&s.catalyst)
            .trim()
            .to_lowercase();
        if s.lot != rec.lot && their == key && earlier(&start(s), &mine) {
            members.push((start(s), s.lot.clone()));
        }
    }
    // The most recent first.
    members.sort_by(|a, b| b.0.cmp(&a.0));
    let mut estimates = Vec::new();
    for (_, lot) in members {
        if estimates.len() >= MAX_FAMILY_LOTS {
            break;
        }
        let Some((ranking, n)) = store::lots::stored_ranking(conn, &lot, basis, as_of)? else {
            continue;
        };
        let ranking: Vec<RankEntry> = match serde_json::from_str(&ranking) {
            Ok(r) => r,
            Err(e) => {
                tracing::warn!(lot = %lot, error = %e, "stored ranking unreadable; lot left out of its family's prior");
                continue;
            }
        };
        let n = usize::try_from(n).unwrap_or(0);
        if let Some(e) = ranking
            .iter()
            .find(|r| r.model == PRIOR_MODEL)
            .and_then(|r| r.family_estimate(&lot, n))
        {
            estimates.push(e);
        }
    }
    Ok(FamilyPrior::from_estimates(PRIOR_MODEL, &estimates).ok())
}
