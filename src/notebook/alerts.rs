//! The bridge from a lot's computed state to the pure alert rules and the outbox: builds
//! the rules' [`LotSnapshot`] from stored records and the fit, and queues what the rules
//! raise in the caller's transaction (the same one as the records that raised it).

use crate::store::Transaction;

use crate::alert::{self, evaluate};
use crate::alert::{EvidenceRow, LimitSource, LotSnapshot, MetalInProduct, QuarantinedFile};
use crate::chem::PdeTable;
use crate::config::{Config, Measure};
use crate::fit;
use crate::notebook::lots::{CycleState, CycleTotals, LotState};
use crate::store::Result;

/// The metal-in-product limit of a metal: the configured one, else ICH Q3D option 1.
pub fn metal_limit(cfg: &Config, metal: &str) -> Option<(f64, LimitSource)> {
    if let Some(v) = cfg.chemistry.metal_limits_ug_g.get(metal) {
        return Some((
            *v,
            LimitSource::Configured(format!("chemistry.metal_limits_ug_g.{metal}")),
        ));
    }
    PdeTable::ich_q3d()
        .option1_limit(metal, cfg.chemistry.route)
        .map(|v| (v, LimitSource::IchQ3dRecalled))
}

/// The rules' view of a lot's trend forecast.
fn forecast_view(a: &fit::LotAnalysis) -> Option<alert::Forecast> {
    let f = a.forecast.as_ref()?;
    Some(alert::Forecast {
        status: f.status,
        x: f.x,
        lower: f.lower,
        upper: f.upper,
        confidence: f.confidence,
        model: a.chosen.map(|m| m.id().to_string()).unwrap_or_default(),
        cycles_per_day: f.dates.as_ref().and_then(|d| d.cycles_per_day),
        dates: f.dates.as_deref().cloned(),
    })
}

/// The rules' view of the next batch's prediction.
fn next_view(a: &fit::LotAnalysis, confidence: f64) -> Option<alert::NextBatch> {
    let n = a.next_cycle.as_ref()?;
    Some(alert::NextBatch {
        cycle: n.x,
        predicted: n.predicted,
        lower: n.lower,
        upper: n.upper,
        confidence,
        verdict: match n.verdict {
            fit::NextVerdict::Ok => alert::NextBatchVerdict::Ok,
            fit::NextVerdict::Marginal => alert::NextBatchVerdict::Marginal,
            fit::NextVerdict::Below => alert::NextBatchVerdict::Below,
        },
    })
}

/// The rules' view of the abrupt-loss checks.
fn abrupt_view(cfg: &Config, a: &fit::LotAnalysis) -> Option<alert::AbruptLoss> {
    a.abrupt.as_ref().and_then(|b| {
        let p = b.prediction.as_ref()?;
        let half = p.predicted - p.lower;
        Some(alert::AbruptLoss {
            flagged: b.suspected,
            newest: p.observed,
            pi_lower: p.lower,
            pi_upper: p.predicted + half,
            cusum: b.cusum.as_ref().map_or(0.0, |c| c.last),
            h: b.cusum.as_ref().map_or(cfg.fitting.cusum_h, |c| c.h),
            hints: Vec::new(),
        })
    })
}

/// The newest measured metal in product against its limit.
fn metal_view(cfg: &Config, totals: &CycleTotals, metal: &str) -> Option<MetalInProduct> {
    totals.metal_in_product.and_then(|(cycle, ug_per_g)| {
        let (limit, source) = metal_limit(cfg, metal)?;
        Some(MetalInProduct {
            cycle,
            ug_per_g,
            limit_ug_per_g: limit,
            limit_source: source,
        })
    })
}

/// Cycles a message lists as its evidence: the newest (a message is read, not searched;
/// the lot's report lists every cycle).
pub const EVIDENCE_ROWS: usize = 30;

/// The newest [`EVIDENCE_ROWS`] cycles' fitted measure with the file it came from, as
/// the message shows them, oldest first.
fn evidence_rows(cfg: &Config, state: &LotState) -> Vec<EvidenceRow> {
    let mut rows: Vec<EvidenceRow> = state
        .cycles
        .iter()
        .rev()
        .filter_map(|c| {
            let src = c.sources.first();
            Some(EvidenceRow {
                cycle: c.cycle,
                value: evidence_value(cfg, c)?,
                source_file: src.map(|s| s.path.clone()).unwrap_or_default(),
                sha256: src.map(|s| s.sha256.clone()).unwrap_or_default(),
            })
        })
        .take(EVIDENCE_ROWS)
        .collect();
    rows.reverse();
    rows
}

/// The fitted measure a message shows for a cycle, when it has one.
pub(crate) fn evidence_value(cfg: &Config, c: &CycleState) -> Option<f64> {
    let m = c.metrics.as_ref()?;
    if cfg.fitting.measure == Measure::Ton {
        m.ton
    } else {
        m.activity
    }
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
    let forecast = a.and_then(forecast_view);
    let next_batch = a.and_then(|a| next_view(a, cfg.fitting.confidence));
    let abrupt = a.and_then(|a| abrupt_view(cfg, a)).map(|mut ab| {
        if ab.flagged {
            ab.hints = super::causes::lot_causes(cfg, state)
                .map(|h| h.lines())
                .unwrap_or_default();
        }
        ab
    });
    let totals = state.totals();
    let metal_in_product = metal_view(cfg, &totals, &rec.metal);
    let evidence = evidence_rows(cfg, state);
    Some(LotSnapshot {
        lot: state.lot.clone(),
        catalyst: rec.catalyst.clone(),
        metal: rec.metal.clone(),
        site: rec.site.clone().unwrap_or_default(),
        cycles_done: totals.count as u32,
        latest_activity: totals.latest_activity,
        criterion,
        forecast,
        next_batch,
        abrupt,
        metal_in_product,
        metal_loss_fraction: totals.loss_fraction,
        economic_cycle: a
            .and_then(|a| a.economics.as_ref())
            .filter(|e| !e.at_horizon)
            .map(|e| e.best_cycles as u32),
        quarantined: Vec::new(),
        evidence,
    })
}

/// Evaluate the rules for a lot and queue what they raise.
pub fn raise(
    tx: &Transaction<'_>,
    cfg: &Config,
    state: &LotState,
    cause: Option<&str>,
) -> Result<usize> {
    let Some(snap) = snapshot(cfg, state) else {
        return Ok(0);
    };
    let mut alerts = evaluate(&snap, &cfg.alerts);
    if let Some(web) = &cfg.web {
        for a in &mut alerts {
            a.link = Some(web.lot_url(&a.lot));
        }
    }
    if let Some(c) = cause {
        for a in &mut alerts {
            a.evidence.push_str(&format!("This follows {c}.\n"));
        }
    }
    crate::store::outbox::enqueue(tx, &alerts, &crate::model::time::now_utc())
}

/// The lot name of file notices, which belong to no lot.
pub const NO_LOT: &str = "(no lot)";

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
    rules.rules = alert::RuleSwitches {
        replacement_forecast: false,
        next_batch: false,
        below_criterion: false,
        abrupt_loss: false,
        metal_in_product: false,
        metal_loss: false,
        economic_point: false,
        quarantine: cfg.alerts.rules.quarantine,
    };
    let snap = LotSnapshot {
        lot: NO_LOT.into(),
        catalyst: String::new(),
        metal: String::new(),
        site: site.unwrap_or_default().to_string(),
        cycles_done: 0,
        latest_activity: None,
        criterion: f64::NAN,
        forecast: None,
        next_batch: None,
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
        .filter(|a| a.rule == alert::RuleId::Quarantine && a.state == alert::AlertState::Open)
        .collect();
    crate::store::outbox::enqueue(tx, &alerts, &crate::model::time::now_utc())
}

/// One alert as `turnbook alerts` lists it.
#[derive(Debug, Clone, serde::Serialize)]
pub struct AlertEntry {
    pub id: i64,
    pub key: String,
    /// None for a file notice that belongs to no lot.
    pub lot: Option<String>,
    /// The rule that raised it (`next-batch`, `abrupt-loss`, `quarantine`, ...).
    pub kind: String,
    /// `critical`, `warning` or `info`.
    pub severity: String,
    /// `open`, `acknowledged`, `closed` or `cleared`.
    pub state: String,
    /// When the current episode began (RFC 3339 UTC) and, for people, in plant time.
    pub since: String,
    pub since_local: String,
    pub subject: String,
    /// Who acknowledged or closed it, when and why (newest last).
    pub actions: Vec<AlertActionLine>,
}

/// A person's action on an alert.
#[derive(Debug, Clone, serde::Serialize)]
pub struct AlertActionLine {
    pub event: i64,
    pub at: String,
    pub actor: String,
    pub action: String,
    pub reason: String,
}

/// Every alert with its state: the condition's own (open, worse counted as open, or
/// cleared), then a person's acknowledgement or closing of the current episode, unless
/// the condition became worse after it. `all` false leaves out cleared and closed ones.
pub fn list_alerts(cfg: &Config, all: bool) -> crate::notebook::Result<Vec<AlertEntry>> {
    let conn = crate::store::open(&cfg.database_path())?;
    let actions = crate::store::outbox::actions(&conn)?;
    let tz = cfg.zone();
    let mut out = Vec::new();
    for c in crate::store::outbox::conditions(&conn)? {
        let mine: Vec<&crate::store::outbox::ActionRow> = actions
            .iter()
            .filter(|a| a.alert_key == c.key && a.episode == c.episode)
            .collect();
        let state = if c.state == alert::AlertState::Cleared {
            "cleared"
        } else {
            match mine.last() {
                // An acknowledgement holds until the condition becomes worse after it.
                Some(a) if a.at >= c.changed_at || c.state != alert::AlertState::Worse => {
                    if mine.iter().any(|a| a.action == "closed") {
                        "closed"
                    } else {
                        "acknowledged"
                    }
                }
                _ => "open",
            }
        };
        if !all && matches!(state, "cleared" | "closed") {
            continue;
        }
        let since_local = crate::model::time::parse_ts(&c.since)
            .map(|t| crate::model::calendar::show_local(tz, t))
            .unwrap_or_else(|_| c.since.clone());
        out.push(AlertEntry {
            id: c.id,
            key: c.key.clone(),
            lot: (c.lot != NO_LOT).then(|| c.lot.clone()),
            kind: c.rule.clone(),
            severity: c.severity.as_str().to_string(),
            state: state.to_string(),
            since: c.since.clone(),
            since_local,
            // The stored subject starts with the state tag the listing shows in columns.
            subject: match c.subject.split_once("] ") {
                Some((tag, rest)) if tag.starts_with('[') => rest.to_string(),
                _ => c.subject.clone(),
            },
            actions: mine
                .iter()
                .map(|a| AlertActionLine {
                    event: a.seq,
                    at: a.at.clone(),
                    actor: a.actor.clone(),
                    action: a.action.clone(),
                    reason: a.reason.clone(),
                })
                .collect(),
        });
    }
    Ok(out)
}

/// Close the file notices of files that have now been ingested under the same path (a
/// corrected re-export): each open notice gets its "cleared" message, saying so.
pub fn close_file_notices(tx: &Transaction<'_>, cfg: &Config, ingested: &[&str]) -> Result<usize> {
    if ingested.is_empty() {
        return Ok(0);
    }
    let open = crate::store::outbox::open_file_notices(tx)?;
    if open.is_empty() {
        return Ok(0);
    }
    let now = crate::model::time::now_utc();
    let prefix = format!("{}|{NO_LOT}|", alert::RuleId::Quarantine.as_str());
    let alerts: Vec<alert::Alert> = open
        .iter()
        .filter_map(|key| {
            let path = key.strip_prefix(&prefix)?;
            ingested.contains(&path).then(|| alert::Alert {
                key: key.clone(),
                rule: alert::RuleId::Quarantine,
                lot: NO_LOT.to_string(),
                site: String::new(),
                file: Some(path.to_string()),
                state: alert::AlertState::Cleared,
                severity: alert::Severity::Info,
                subject: format!("file set aside: {path}"),
                action: String::new(),
                evidence: format!(
                    "A file with the same path, {path}, was ingested at {now}: this notice is \
                     closed.\n"
                ),
                recipients: alert::recipients_for(
                    alert::RuleId::Quarantine,
                    alert::Severity::Warning,
                    "",
                    &cfg.alerts,
                ),
                rows: Vec::new(),
                criterion: f64::NAN,
                link: None,
            })
        })
        .collect();
    crate::store::outbox::enqueue(tx, &alerts, &now)
}
