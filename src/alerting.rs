//! The bridge from a lot's computed state to the pure alert rules and the outbox: builds
//! the rules' [`LotSnapshot`] from stored records and the fit, and queues what the rules
//! raise in the caller's transaction (the same one as the records that raised it).

use rusqlite::{Connection, Transaction};

use crate::alert::rules::{
    self, EvidenceRow, LimitSource, LotSnapshot, MetalInProduct, QuarantinedFile,
};
use crate::alert::{self, evaluate};
use crate::analysis::LotState;
use crate::chem::{PdeTable, Route};
use crate::config::Config;
use crate::fit;
use crate::ingest::Quantity;
use crate::store::{Result, StoreError};

fn route(cfg: &Config) -> Route {
    match cfg.chemistry.route.as_str() {
        "parenteral" => Route::Parenteral,
        "inhalation" => Route::Inhalation,
        _ => Route::Oral,
    }
}

/// The metal-in-product limit of a metal: the configured one, else ICH Q3D option 1.
pub fn metal_limit(cfg: &Config, metal: &str) -> Option<(f64, LimitSource)> {
    if let Some(v) = cfg.chemistry.metal_limits_ug_g.get(metal) {
        return Some((
            *v,
            LimitSource::Configured(format!("chemistry.metal_limits_ug_g.{metal}")),
        ));
    }
    PdeTable::ich_q3d()
        .option1_limit(metal, route(cfg))
        .map(|v| (v, LimitSource::IchQ3dRecalled))
}

/// Cycles per day at the lot's cadence, from the start times of its cycles.
fn cadence(state: &LotState) -> Option<f64> {
    let times: Vec<chrono::NaiveDateTime> = state
        .cycles
        .iter()
        .filter_map(|c| c.view.started_at.as_deref())
        .filter_map(|t| chrono::NaiveDateTime::parse_from_str(t, "%Y-%m-%dT%H:%M:%S").ok())
        .collect();
    let (first, last) = (times.iter().min()?, times.iter().max()?);
    let days = (*last - *first).num_seconds() as f64 / 86_400.0;
    (times.len() >= 2 && days > 0.0).then(|| (times.len() - 1) as f64 / days)
}

/// The rules' view of one lot.
pub fn snapshot(cfg: &Config, state: &LotState) -> Option<LotSnapshot> {
    let rec = state.record.as_ref()?;
    let a = state.analysis.as_ref();
    let criterion = a
        .and_then(|a| {
            a.forecast
                .as_ref()
                .and_then(|f| f.threshold)
                .or(a.plot.as_ref().and_then(|p| p.threshold))
        })
        .unwrap_or(f64::NAN);
    let forecast = a.and_then(|a| {
        let f = a.forecast.as_ref()?;
        Some(rules::Forecast {
            status: match f.status {
                fit::ForecastStatus::Ahead => rules::ForecastStatus::Crossing,
                fit::ForecastStatus::ReachedAlready => rules::ForecastStatus::ReachedAlready,
                fit::ForecastStatus::NotReached
                | fit::ForecastStatus::NoSignificantTrend
                | fit::ForecastStatus::Withheld => rules::ForecastStatus::NotReached,
                fit::ForecastStatus::UnboundedInterval => rules::ForecastStatus::Unbounded,
            },
            x: f.x,
            lower: f.lower,
            upper: f.upper,
            confidence: f.confidence,
            model: a.chosen.map(|m| m.id().to_string()).unwrap_or_default(),
            cycles_per_day: cadence(state),
        })
    });
    let abrupt = a.and_then(|a| a.abrupt.as_ref()).and_then(|b| {
        let p = b.prediction.as_ref()?;
        let half = p.predicted - p.lower;
        Some(rules::AbruptLoss {
            flagged: b.suspected,
            newest: p.observed,
            pi_lower: p.lower,
            pi_upper: p.predicted + half,
            cusum: b.cusum.as_ref().map_or(0.0, |c| c.last),
            h: b.cusum.as_ref().map_or(cfg.fitting.cusum_h, |c| c.h),
        })
    });
    let newest = state
        .cycles
        .iter()
        .rev()
        .find(|c| c.view.get(Quantity::MetalInProduct).is_some());
    let metal_in_product = newest.and_then(|c| {
        let (limit, source) = metal_limit(cfg, &rec.metal)?;
        Some(MetalInProduct {
            cycle: c.cycle,
            ug_per_g: c.view.get(Quantity::MetalInProduct)?,
            limit_ug_per_g: limit,
            limit_source: source,
        })
    });
    let evidence = state
        .cycles
        .iter()
        .filter_map(|c| {
            let m = c.metrics.as_ref()?;
            let value = if cfg.fitting.measure == "ton" {
                m.ton?
            } else {
                m.activity?
            };
            let src = c.sources.first();
            Some(EvidenceRow {
                cycle: c.cycle,
                value,
                source_file: src.map(|s| s.path.clone()).unwrap_or_default(),
                sha256: src.map(|s| s.sha256.clone()).unwrap_or_default(),
            })
        })
        .collect();
    Some(LotSnapshot {
        lot: state.lot.clone(),
        catalyst: rec.catalyst.clone(),
        metal: rec.metal.clone(),
        site: rec.site.clone().unwrap_or_default(),
        cycles_done: state.cycles.len() as u32,
        latest_activity: state.latest_activity(),
        criterion,
        forecast,
        abrupt,
        metal_in_product,
        metal_loss_fraction: state
            .cycles
            .iter()
            .rev()
            .find_map(|c| c.metrics.as_ref().and_then(|m| m.cumulative_loss_fraction)),
        economic_cycle: a
            .and_then(|a| a.economics.as_ref())
            .filter(|e| !e.at_horizon)
            .map(|e| e.best_cycles as u32),
        quarantined: Vec::new(),
        evidence,
    })
}

fn alert_err(e: alert::AlertError) -> StoreError {
    match e {
        alert::AlertError::Db(e) => StoreError::Sqlite(e),
        e => StoreError::Invalid(e.to_string()),
    }
}

/// Evaluate the rules for a lot and queue what they raise.
pub fn raise(tx: &Transaction<'_>, cfg: &Config, state: &LotState) -> Result<usize> {
    let Some(snap) = snapshot(cfg, state) else {
        return Ok(0);
    };
    let alerts = evaluate(&snap, &cfg.alerts);
    alert::enqueue(tx, &alerts, &crate::audit::now_utc()).map_err(alert_err)
}

/// Queue the quarantine alert (to QA) for a rejected file.
pub fn raise_quarantine(
    tx: &Transaction<'_>,
    cfg: &Config,
    site: Option<&str>,
    name: &str,
    reason: &str,
) -> Result<usize> {
    let mut rules = cfg.alerts.clone();
    // Only the quarantine rule speaks for a file that belongs to no lot yet.
    rules.rules = rules::RuleSwitches {
        replacement_forecast: false,
        below_criterion: false,
        abrupt_loss: false,
        metal_in_product: false,
        metal_loss: false,
        economic_point: false,
        quarantine: cfg.alerts.rules.quarantine,
    };
    let snap = LotSnapshot {
        lot: "(no lot)".into(),
        catalyst: String::new(),
        metal: String::new(),
        site: site.unwrap_or_default().to_string(),
        cycles_done: 0,
        latest_activity: None,
        criterion: f64::NAN,
        forecast: None,
        abrupt: None,
        metal_in_product: None,
        metal_loss_fraction: None,
        economic_cycle: None,
        quarantined: vec![QuarantinedFile {
            name: name.to_string(),
            reason: reason.to_string(),
        }],
        evidence: Vec::new(),
    };
    let alerts: Vec<_> = evaluate(&snap, &rules)
        .into_iter()
        .filter(|a| a.rule == rules::RuleId::Quarantine && a.state == alert::AlertState::Open)
        .collect();
    alert::enqueue(tx, &alerts, &crate::audit::now_utc()).map_err(alert_err)
}

/// Messages not yet delivered.
pub fn outbox_waiting(conn: &Connection) -> Result<i64> {
    Ok(conn.query_row(
        "SELECT COUNT(*) FROM alert_outbox WHERE delivered_at IS NULL",
        [],
        |r| r.get(0),
    )?)
}
