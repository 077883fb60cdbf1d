//! "Why did it drop?" for a lot: when a step loss is detected, or the lot declines fast
//! (the next batch is marginal or below, or the forecast falls within the lead), the
//! suspect cycle's conditions are compared with the lot's usual ones
//! ([`crate::chem::cause`]).

use crate::chem::cause::{CauseHints, Conditions, cause_hints};
use crate::config::Config;
use crate::fit::{LotAnalysis, NextVerdict};
use crate::model::{ForecastStatus, Quantity};
use crate::notebook::lots::{CycleState, LotState};
use std::collections::BTreeMap;

/// The cycle worth explaining: the first of a new level after a step, the newest cycle
/// of a suspected step or of a fast decline; None when nothing calls for it.
fn suspect(cfg: &Config, state: &LotState) -> Option<u32> {
    let newest = state
        .cycles
        .iter()
        .rev()
        .find(|c| !c.view.excluded && c.metrics.as_ref().and_then(|m| m.activity).is_some())?
        .cycle;
    suspect_of(cfg, state.analysis.as_ref()?, newest)
}

/// [`suspect`] from the analysis and the newest cycle with an activity that counts.
pub(crate) fn suspect_of(cfg: &Config, a: &LotAnalysis, newest: u32) -> Option<u32> {
    if let Some(ab) = a.abrupt.as_ref().filter(|b| b.suspected) {
        return Some(
            ab.change_at
                .filter(|x| x.is_finite() && *x >= 1.0)
                .map_or(newest, |x| x.round() as u32),
        );
    }
    let next_bad = a
        .next_cycle
        .as_ref()
        .is_some_and(|n| n.verdict != NextVerdict::Ok);
    let soon = a.forecast.as_ref().is_some_and(|f| {
        f.status == ForecastStatus::Ahead
            && f.lower
                .or(f.x)
                .is_some_and(|x| x - f64::from(newest) <= cfg.alerts.lead_cycles)
    });
    (next_bad || soon).then_some(newest)
}

/// One cycle's conditions as the hints compare them.
pub(crate) fn conditions(feed_lots: &BTreeMap<String, String>, c: &CycleState) -> Conditions {
    let m = c.metrics.as_ref();
    let substrate = c.view.get(Quantity::Substrate);
    Conditions {
        cycle: c.cycle,
        temperature_k: c.view.get(Quantity::Temperature),
        duration_s: c.view.get(Quantity::Duration),
        substrate_mol: substrate,
        catalyst_ratio: m
            .and_then(|m| m.metal_mol)
            .zip(substrate)
            .filter(|(_, s)| *s > 0.0)
            .map(|(mm, s)| mm / s),
        metal_in_product_ug_g: c.view.get(Quantity::MetalInProduct),
        feed_lot: feed_lots.get(&c.view.batch_id).cloned(),
    }
}

/// The hints for a lot, when a step or a fast decline calls for them.
pub fn lot_causes(cfg: &Config, state: &LotState) -> Option<CauseHints> {
    if let Some(s) = &state.streamed {
        return s.hints.clone();
    }
    let cycle = suspect(cfg, state)?;
    let history: Vec<Conditions> = state
        .cycles
        .iter()
        .filter(|c| !c.view.excluded)
        .map(|c| conditions(&state.feed_lots, c))
        .collect();
    let activity = |n: u32| {
        state
            .cycles
            .iter()
            .find(|c| c.cycle == n)
            .and_then(|c| c.metrics.as_ref())
            .and_then(|m| m.activity)
    };
    let metal_lost_before = state
        .cycles
        .iter()
        .rev()
        .filter(|c| c.cycle < cycle)
        .find_map(|c| c.metrics.as_ref().and_then(|m| m.cumulative_loss_fraction));
    cause_hints(&history, cycle, activity, metal_lost_before)
}
