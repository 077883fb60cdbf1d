//! Alert rules: pure functions from one lot's snapshot and the `[alerts]` configuration to
//! the alerts that should be raised (or cleared) now. No clock, no I/O, no database: the
//! outbox decides from its own history whether an alert is new, worse or a repeat.

use std::collections::BTreeMap;
use std::fmt::{self, Write as _};

use serde::{Deserialize, Serialize};

use super::schedule::DigestSchedule;
pub use crate::model::ForecastStatus;

/// The replacement forecast from the model chosen for the lot.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Forecast {
    pub status: ForecastStatus,
    /// Estimated cycle number of the crossing.
    pub x: Option<f64>,
    /// Lower confidence bound of the crossing (None when unbounded).
    pub lower: Option<f64>,
    /// Upper confidence bound of the crossing (None when unbounded).
    pub upper: Option<f64>,
    /// Confidence level of the interval, e.g. 0.95.
    pub confidence: f64,
    /// Identifier of the fitted model (e.g. "first-order").
    pub model: String,
    /// The lot's cadence, used to turn cycles into days for a lead in days.
    pub cycles_per_day: Option<f64>,
    /// The crossing in local dates with the order-by date, when the lot has a cadence.
    pub dates: Option<crate::model::calendar::CrossingDates>,
}

/// Abrupt-loss check on the newest cycle (prediction interval and Page's CUSUM).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct AbruptLoss {
    pub flagged: bool,
    pub newest: f64,
    pub pi_lower: f64,
    pub pi_upper: f64,
    pub cusum: f64,
    pub h: f64,
    /// Why it may have dropped: the cycle's conditions against the lot's usual ones.
    pub hints: Vec<String>,
}

/// Where a metal limit came from; shown beside the number so nobody mistakes a recalled
/// value for a configured specification.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum LimitSource {
    /// A specification configured by the site.
    Configured(String),
    /// ICH Q3D option 1 concentration limit, value recalled from memory.
    IchQ3dRecalled,
}

impl fmt::Display for LimitSource {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            LimitSource::Configured(name) => write!(f, "configured spec {name}"),
            LimitSource::IchQ3dRecalled => f.write_str("ICH Q3D option 1 (recalled from memory)"),
        }
    }
}

/// Metal found in the product of the newest cycle, with its limit.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MetalInProduct {
    pub cycle: u32,
    pub ug_per_g: f64,
    pub limit_ug_per_g: f64,
    pub limit_source: LimitSource,
}

/// The verdict on the next batch (see the analysis's next-cycle prediction).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub enum NextBatchVerdict {
    /// The lower prediction bound lies above the criterion.
    Ok,
    /// Predicted above the criterion, but the interval reaches below it.
    Marginal,
    /// Predicted below the criterion.
    Below,
}

/// The next batch's predicted activity with its prediction interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct NextBatch {
    pub cycle: f64,
    pub predicted: f64,
    pub lower: f64,
    pub upper: f64,
    pub confidence: f64,
    pub verdict: NextBatchVerdict,
}

/// A file that could not be read and was kept aside.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct QuarantinedFile {
    pub name: String,
    pub reason: String,
}

/// One evidence row: a cycle's value traced to its source file.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct EvidenceRow {
    pub cycle: u32,
    pub value: f64,
    pub source_file: String,
    pub sha256: String,
}

/// Everything the rules need about one lot, filled by the caller from records and fits.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotSnapshot {
    pub lot: String,
    pub catalyst: String,
    pub metal: String,
    pub site: String,
    pub cycles_done: u32,
    pub latest_activity: Option<f64>,
    /// Replacement criterion on the activity measure.
    pub criterion: f64,
    pub forecast: Option<Forecast>,
    pub next_batch: Option<NextBatch>,
    pub abrupt: Option<AbruptLoss>,
    pub metal_in_product: Option<MetalInProduct>,
    /// Cumulative metal lost as a fraction of the metal charged (0..1).
    pub metal_loss_fraction: Option<f64>,
    /// Cycle that minimises the cost per kg of product.
    pub economic_cycle: Option<u32>,
    pub quarantined: Vec<QuarantinedFile>,
    pub evidence: Vec<EvidenceRow>,
}

/// Which bound of the forecast interval decides "within the lead".
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Default)]
#[serde(rename_all = "kebab-case")]
pub enum ForecastBound {
    /// The early end of the interval: warns soonest (conservative).
    #[default]
    Lower,
    Estimate,
    Upper,
}

/// On/off switch per rule.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct RuleSwitches {
    pub replacement_forecast: bool,
    pub next_batch: bool,
    pub below_criterion: bool,
    pub abrupt_loss: bool,
    pub metal_in_product: bool,
    pub metal_loss: bool,
    pub economic_point: bool,
    pub quarantine: bool,
}

impl Default for RuleSwitches {
    fn default() -> Self {
        RuleSwitches {
            replacement_forecast: true,
            next_batch: true,
            below_criterion: true,
            abrupt_loss: true,
            metal_in_product: true,
            metal_loss: true,
            economic_point: true,
            quarantine: true,
        }
    }
}

/// Addresses per audience.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize, Default)]
#[serde(deny_unknown_fields, default)]
pub struct Recipients {
    pub chemists: Vec<String>,
    pub qa: Vec<String>,
    pub managers: Vec<String>,
}

/// A site's replacement lists; an absent list keeps the general one.
#[derive(Debug, Clone, PartialEq, Eq, Deserialize, Default)]
#[serde(deny_unknown_fields, default)]
pub struct SiteRecipients {
    pub chemists: Option<Vec<String>>,
    pub qa: Option<Vec<String>>,
    pub managers: Option<Vec<String>>,
}

/// The `[alerts]` configuration section.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct AlertRules {
    /// Warn when the forecast crossing is at most this many cycles ahead.
    pub lead_cycles: f64,
    /// Also warn when the crossing is at most this many days ahead (needs a cadence).
    pub lead_days: Option<f64>,
    /// Procurement and qualification lead time by catalyst description (days), where it
    /// differs from `lead_days`; it sets the order-by date.
    pub lead_days_by_catalyst: BTreeMap<String, f64>,
    pub forecast_bound: ForecastBound,
    /// Cumulative metal-loss fraction above which the lot is flagged.
    pub metal_loss_limit: f64,
    /// Fraction of the metal limit at which an early warning is raised.
    pub metal_warn_ratio: f64,
    pub rules: RuleSwitches,
    pub recipients: Recipients,
    /// Per-site overrides, keyed by site name.
    pub sites: BTreeMap<String, SiteRecipients>,
    /// When the managers' digest goes out ("daily HH:MM" or "weekly DAY HH:MM", UTC);
    /// absent means no digest.
    pub digest: Option<DigestSchedule>,
    /// In a backfill, a lot whose newest batch started more than this many days before
    /// the newest batch the store records is history: its state is stored and shown, its
    /// alerts are not raised (no mail for lots finished long ago).
    pub backfill_history_days: f64,
}

impl Default for AlertRules {
    fn default() -> Self {
        AlertRules {
            // Starting points, not taken from a standard: each site sets the lead to the
            // time it needs to order and qualify a fresh lot, and its own loss limit.
            lead_cycles: 3.0,
            lead_days: None,
            lead_days_by_catalyst: BTreeMap::new(),
            forecast_bound: ForecastBound::Lower,
            metal_loss_limit: 0.05,
            metal_warn_ratio: 0.8,
            rules: RuleSwitches::default(),
            recipients: Recipients::default(),
            sites: BTreeMap::new(),
            digest: None,
            // Common practice scale, not a standard: a lot unused for a quarter while
            // the plant ran is out of service.
            backfill_history_days: 90.0,
        }
    }
}

impl AlertRules {
    /// The lead time of a catalyst: its own entry (description compared without case and
    /// surrounding space), else the general `lead_days`.
    pub fn lead_days_for(&self, catalyst: &str) -> Option<f64> {
        let want = catalyst.trim();
        self.lead_days_by_catalyst
            .iter()
            .find(|(k, _)| k.trim().eq_ignore_ascii_case(want))
            .map(|(_, v)| *v)
            .or(self.lead_days)
    }

    /// Problems with the section, one message each; empty when it is usable.
    pub fn problems(&self) -> Vec<String> {
        let mut p = Vec::new();
        if !(self.lead_cycles.is_finite() && self.lead_cycles >= 0.0) {
            p.push(format!(
                "alerts.lead_cycles must be >= 0, got {}",
                self.lead_cycles
            ));
        }
        if let Some(d) = self.lead_days
            && !(d.is_finite() && d >= 0.0)
        {
            p.push(format!("alerts.lead_days must be >= 0, got {d}"));
        }
        for (cat, d) in &self.lead_days_by_catalyst {
            if !(d.is_finite() && *d >= 0.0 && *d <= 3650.0) {
                p.push(format!(
                    "alerts.lead_days_by_catalyst.{cat:?} must be days between 0 and 3650, got {d}"
                ));
            }
        }
        if !(self.metal_loss_limit > 0.0 && self.metal_loss_limit <= 1.0) {
            p.push(format!(
                "alerts.metal_loss_limit is a fraction in (0, 1], got {}",
                self.metal_loss_limit
            ));
        }
        if !(self.metal_warn_ratio > 0.0 && self.metal_warn_ratio <= 1.0) {
            p.push(format!(
                "alerts.metal_warn_ratio is a fraction in (0, 1], got {}",
                self.metal_warn_ratio
            ));
        }
        let site_lists = self.sites.iter().flat_map(|(site, o)| {
            [&o.chemists, &o.qa, &o.managers]
                .into_iter()
                .flatten()
                .flatten()
                .map(move |a| (format!("alerts.sites.{site}"), a))
        });
        let general = [
            &self.recipients.chemists,
            &self.recipients.qa,
            &self.recipients.managers,
        ]
        .into_iter()
        .flatten()
        .map(|a| ("alerts.recipients".to_string(), a));
        for (place, addr) in general.chain(site_lists) {
            if addr.parse::<lettre::message::Mailbox>().is_err() {
                p.push(format!("{place}: {addr:?} is not a mail address"));
            }
        }
        p
    }
}

/// The rules, by a stable name used in alert keys and stored in the outbox.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum RuleId {
    ReplacementForecast,
    NextBatch,
    BelowCriterion,
    AbruptLoss,
    MetalInProduct,
    MetalLoss,
    EconomicPoint,
    Quarantine,
}

impl RuleId {
    pub fn as_str(self) -> &'static str {
        match self {
            RuleId::ReplacementForecast => "replacement-forecast",
            RuleId::NextBatch => "next-batch",
            RuleId::BelowCriterion => "below-criterion",
            RuleId::AbruptLoss => "abrupt-loss",
            RuleId::MetalInProduct => "metal-in-product",
            RuleId::MetalLoss => "metal-loss",
            RuleId::EconomicPoint => "economic-point",
            RuleId::Quarantine => "quarantine",
        }
    }
}

/// How urgent an alert is; a rise in severity while open queues a "worse" follow-up.
#[derive(Debug, Clone, Copy, PartialEq, Eq, PartialOrd, Ord, Hash)]
pub enum Severity {
    Info = 1,
    Warning = 2,
    Critical = 3,
}

impl Severity {
    pub fn as_str(self) -> &'static str {
        match self {
            Severity::Info => "info",
            Severity::Warning => "warning",
            Severity::Critical => "critical",
        }
    }
    pub fn from_level(level: i64) -> Option<Severity> {
        match level {
            1 => Some(Severity::Info),
            2 => Some(Severity::Warning),
            3 => Some(Severity::Critical),
            _ => None,
        }
    }
}

/// State of an alert's condition. `Worse` and `Eased` are never produced by [`evaluate`]:
/// the outbox assigns them when an open alert comes back with a higher or lower severity.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum AlertState {
    Open,
    Worse,
    /// Still open, at a lower severity than the last message said.
    Eased,
    Cleared,
}

impl AlertState {
    pub fn as_str(self) -> &'static str {
        match self {
            AlertState::Open => "open",
            AlertState::Worse => "worse",
            AlertState::Eased => "eased",
            AlertState::Cleared => "cleared",
        }
    }
    pub fn parse(s: &str) -> Option<AlertState> {
        match s {
            "open" => Some(AlertState::Open),
            "worse" => Some(AlertState::Worse),
            "eased" => Some(AlertState::Eased),
            "cleared" => Some(AlertState::Cleared),
            _ => None,
        }
    }
}

/// One alert as decided by the rules. Text fields hold raw (unsafe) export text; the
/// composer makes them safe for headers and HTML.
#[derive(Debug, Clone, PartialEq)]
pub struct Alert {
    /// Stable identity of the condition: rule + lot (+ file).
    pub key: String,
    pub rule: RuleId,
    pub lot: String,
    pub site: String,
    pub file: Option<String>,
    pub state: AlertState,
    pub severity: Severity,
    /// "LOT: what, by when", without the product's name.
    pub subject: String,
    /// What the reader should do, one sentence; the body opens with it.
    pub action: String,
    /// Plain-text evidence, one fact per line.
    pub evidence: String,
    pub recipients: Vec<String>,
    /// Rows for the chart and the provenance table.
    pub rows: Vec<EvidenceRow>,
    pub criterion: f64,
    /// Where the lot's page and printable report are served, when the web view is on.
    pub link: Option<String>,
}

#[derive(Clone, Copy, PartialEq)]
enum Audience {
    Chemists,
    Qa,
    Managers,
}

/// Who hears of a rule's alert at a severity: the rule's audience, and the managers too
/// for every critical alert (they decide on stopping a lot or a batch).
fn audience_of(rule: RuleId, severity: Severity) -> Vec<Audience> {
    use Audience::*;
    let mut a: Vec<Audience> = match rule {
        RuleId::ReplacementForecast | RuleId::BelowCriterion | RuleId::MetalLoss => {
            vec![Chemists, Managers]
        }
        RuleId::NextBatch | RuleId::AbruptLoss => vec![Chemists],
        RuleId::MetalInProduct => vec![Qa, Chemists],
        RuleId::EconomicPoint => vec![Managers],
        RuleId::Quarantine => vec![Qa],
    };
    if severity == Severity::Critical && !a.contains(&Managers) {
        a.push(Managers);
    }
    a
}

/// Recipients of a rule's alert at a site and severity: the site's list where given, else
/// the general one; duplicates removed, order kept.
pub fn recipients_for(
    rule: RuleId,
    severity: Severity,
    site: &str,
    rules: &AlertRules,
) -> Vec<String> {
    let over = rules.sites.get(site);
    let mut out: Vec<String> = Vec::new();
    for aud in audience_of(rule, severity) {
        let list = match aud {
            Audience::Chemists => over
                .and_then(|o| o.chemists.as_ref())
                .unwrap_or(&rules.recipients.chemists),
            Audience::Qa => over
                .and_then(|o| o.qa.as_ref())
                .unwrap_or(&rules.recipients.qa),
            Audience::Managers => over
                .and_then(|o| o.managers.as_ref())
                .unwrap_or(&rules.recipients.managers),
        };
        for addr in list {
            let a = addr.trim();
            if !a.is_empty() && !out.iter().any(|x| x.eq_ignore_ascii_case(a)) {
                out.push(a.to_string());
            }
        }
    }
    out
}

/// An activity (a dimensionless ratio near 1): two decimals carry what a batch assay
/// supports.
fn act(v: f64) -> String {
    crate::model::numbers::fixed_or(Some(v), 2, "n/a")
}

/// A cycle number or a count of cycles: one decimal for a fitted value.
fn cyc(v: f64) -> String {
    crate::model::numbers::fixed_or(Some(v), 1, "n/a")
}

fn cyc_opt(v: Option<f64>) -> String {
    v.map(cyc).unwrap_or_else(|| "unbounded".to_string())
}

/// A figure to three significant digits (µg/g, CUSUM statistics).
fn sig3(v: f64) -> String {
    if !v.is_finite() {
        return "n/a".to_string();
    }
    let mag = if v == 0.0 {
        0
    } else {
        v.abs().log10().floor() as i32
    };
    let decimals = (2 - mag).clamp(0, 6) as usize;
    format!("{v:.decimals$}")
}

struct Builder<'a> {
    snap: &'a LotSnapshot,
    rules: &'a AlertRules,
    out: Vec<Alert>,
}

/// What a rule says about a lot: active with a severity, or not.
struct Verdict {
    active: Option<Severity>,
    subject: String,
    action: String,
    evidence: String,
}

impl Builder<'_> {
    fn push(&mut self, rule: RuleId, file: Option<&str>, v: Verdict) {
        let s = self.snap;
        let key = match file {
            Some(f) => format!("{}|{}|{}", rule.as_str(), s.lot, f),
            None => format!("{}|{}", rule.as_str(), s.lot),
        };
        let (state, severity) = match v.active {
            Some(sev) => (AlertState::Open, sev),
            None => (AlertState::Cleared, Severity::Info),
        };
        self.out.push(Alert {
            key,
            rule,
            lot: s.lot.clone(),
            site: s.site.clone(),
            file: file.map(str::to_string),
            state,
            severity,
            subject: v.subject,
            action: v.action,
            evidence: v.evidence,
            recipients: recipients_for(rule, severity, &s.site, self.rules),
            rows: s.evidence.clone(),
            criterion: s.criterion,
            link: None,
        });
    }
}

/// Evaluate all enabled rules for one lot. Every enabled rule that applies yields one
/// alert: `Open` with a severity when its condition holds, `Cleared` when it does not
/// (the outbox only sends a "cleared" follow-up if the alert was open).
///
/// Severity comes from the evidence, by one table (DEVELOPERS.md and the README show it):
///
/// | rule | critical | warning | info |
/// |---|---|---|---|
/// | below-criterion | newest activity below the criterion | — | — |
/// | next-batch | next batch predicted below the criterion | prediction interval reaches below it (`marginal`) | — |
/// | abrupt-loss | step change detected (prediction check or CUSUM) | — | — |
/// | replacement-forecast | — (never) | crossing `ahead` (or with an open late end) within the lead; fitted curve already below while the newest cycle is not | — |
/// | metal-in-product | above its limit (a release question) | above the warning ratio of it | — |
/// | metal-loss | — | cumulative loss above its limit | — |
/// | economic-point | — | — | reached |
/// | quarantine | — | a file could not be read | — |
///
/// No rule raises anything on `no-significant-trend`, `withheld` or `not-reached`.
pub fn evaluate(snap: &LotSnapshot, rules: &AlertRules) -> Vec<Alert> {
    let mut b = Builder {
        snap,
        rules,
        out: Vec::new(),
    };
    let sw = &rules.rules;
    if sw.replacement_forecast
        && let Some(fc) = &snap.forecast
    {
        b.push(
            RuleId::ReplacementForecast,
            None,
            forecast_rule(snap, fc, rules),
        );
    }
    if sw.next_batch
        && let Some(nb) = &snap.next_batch
    {
        b.push(RuleId::NextBatch, None, next_batch_rule(snap, nb));
    }
    if sw.below_criterion
        && let Some(a) = snap.latest_activity
    {
        b.push(RuleId::BelowCriterion, None, below_rule(snap, a));
    }
    if sw.abrupt_loss
        && let Some(ab) = &snap.abrupt
    {
        b.push(RuleId::AbruptLoss, None, abrupt_rule(snap, ab));
    }
    if sw.metal_in_product
        && let Some(m) = &snap.metal_in_product
    {
        b.push(RuleId::MetalInProduct, None, metal_rule(snap, m, rules));
    }
    if sw.metal_loss
        && let Some(f) = snap.metal_loss_fraction
    {
        b.push(RuleId::MetalLoss, None, loss_rule(snap, f, rules));
    }
    if sw.economic_point
        && let Some(n) = snap.economic_cycle
    {
        b.push(RuleId::EconomicPoint, None, economic_rule(snap, n));
    }
    if sw.quarantine {
        for q in &snap.quarantined {
            b.push(RuleId::Quarantine, Some(&q.name), quarantine_rule(q));
        }
    }
    b.out
}

fn next_batch_rule(snap: &LotSnapshot, nb: &NextBatch) -> Verdict {
    let lot = &snap.lot;
    let n = cyc(nb.cycle);
    let evidence = format!(
        "Next batch (cycle {n}): predicted activity {} ({:.0} % prediction interval {} to {}) \
         against the criterion {}.\n",
        act(nb.predicted),
        nb.confidence * 100.0,
        act(nb.lower),
        act(nb.upper),
        act(snap.criterion)
    );
    let (active, subject, action) = match nb.verdict {
        NextBatchVerdict::Below => (
            Some(Severity::Critical),
            format!("{lot}: next batch (cycle {n}) predicted below the replacement criterion"),
            "Do not charge this lot into the next batch without a chemist's review: replace it, \
             or run a check batch first."
                .to_string(),
        ),
        NextBatchVerdict::Marginal => (
            Some(Severity::Warning),
            format!("{lot}: next batch (cycle {n}) marginal against the replacement criterion"),
            "Review before charging the next batch: its prediction interval reaches below the \
             criterion; have a replacement lot ready."
                .to_string(),
        ),
        NextBatchVerdict::Ok => (
            None,
            format!("{lot}: next batch (cycle {n}) predicted above the criterion"),
            "No action needed for the next batch.".to_string(),
        ),
    };
    Verdict {
        active,
        subject,
        action,
        evidence,
    }
}

fn below_rule(snap: &LotSnapshot, a: f64) -> Verdict {
    let lot = &snap.lot;
    let below = a.is_finite() && a < snap.criterion;
    Verdict {
        active: below.then_some(Severity::Critical),
        subject: format!(
            "{lot}: activity {} below the replacement criterion at cycle {}",
            act(a),
            snap.cycles_done
        ),
        action: if below {
            "Take the lot out of service and charge a replacement; send the spent catalyst for \
             metal recovery per site procedure."
                .to_string()
        } else {
            "No action needed: the newest activity is above the criterion again.".to_string()
        },
        evidence: format!(
            "Newest activity {} at cycle {} against the replacement criterion {}.\n",
            act(a),
            snap.cycles_done,
            act(snap.criterion)
        ),
    }
}

fn abrupt_rule(snap: &LotSnapshot, ab: &AbruptLoss) -> Verdict {
    let lot = &snap.lot;
    Verdict {
        active: ab.flagged.then_some(Severity::Critical),
        subject: format!(
            "{lot}: abrupt loss of activity at cycle {}",
            snap.cycles_done
        ),
        action: "Hold the lot and find the cause before the next batch (feed or substrate lot, a \
                 poison, the batch's conditions); have QA look at the batch's product."
            .to_string(),
        evidence: format!(
            "Newest activity {} against the one-step prediction interval {} to {} from the \
             cycles before it.\nCUSUM of standardised residuals {} against the decision limit \
             h = {}.\n",
            act(ab.newest),
            act(ab.pi_lower),
            act(ab.pi_upper),
            sig3(ab.cusum),
            sig3(ab.h)
        ) + &hints_text(&ab.hints),
    }
}

fn hints_text(hints: &[String]) -> String {
    if hints.is_empty() {
        return String::new();
    }
    let mut s = String::from("Why it may have dropped (hints, not a diagnosis):\n");
    for h in hints {
        let _ = writeln!(s, "- {h}");
    }
    s
}

fn metal_rule(snap: &LotSnapshot, m: &MetalInProduct, rules: &AlertRules) -> Verdict {
    let lot = &snap.lot;
    let (active, word) = if !(m.ug_per_g.is_finite() && m.limit_ug_per_g.is_finite()) {
        (None, "unknown against")
    } else if m.ug_per_g > m.limit_ug_per_g {
        (Some(Severity::Critical), "above")
    } else if m.ug_per_g > rules.metal_warn_ratio * m.limit_ug_per_g {
        (Some(Severity::Warning), "near")
    } else {
        (None, "below")
    };
    Verdict {
        active,
        subject: format!(
            "{lot}: {} in the product of cycle {} {word} its limit",
            snap.metal, m.cycle
        ),
        action: match active {
            Some(Severity::Critical) => "Hold the batch's product for QA; check the catalyst \
                                         for leaching before the next batch."
                .to_string(),
            Some(_) => "Watch the next batches' metal results; check the catalyst for leaching."
                .to_string(),
            None => "No action needed.".to_string(),
        },
        evidence: format!(
            "{} in the product of cycle {}: {} µg/g; limit {} µg/g ({}).\n",
            snap.metal,
            m.cycle,
            sig3(m.ug_per_g),
            sig3(m.limit_ug_per_g),
            m.limit_source
        ),
    }
}

fn loss_rule(snap: &LotSnapshot, f: f64, rules: &AlertRules) -> Verdict {
    let lot = &snap.lot;
    let over = f.is_finite() && f > rules.metal_loss_limit;
    Verdict {
        active: over.then_some(Severity::Warning),
        subject: format!(
            "{lot}: cumulative {} loss {:.1} % of the charge",
            snap.metal,
            f * 100.0
        ),
        action: "Check filtration and leaching, and reconcile the metal balance with the \
                 refiner's assay."
            .to_string(),
        evidence: format!(
            "Cumulative {} lost: {:.2} % of the metal charged; limit {:.2} %.\n",
            snap.metal,
            f * 100.0,
            rules.metal_loss_limit * 100.0
        ),
    }
}

fn economic_rule(snap: &LotSnapshot, n: u32) -> Verdict {
    let lot = &snap.lot;
    let reached = snap.cycles_done >= n;
    Verdict {
        active: reached.then_some(Severity::Info),
        subject: format!("{lot}: economic replacement point (cycle {n}) reached"),
        action: "Consider replacing the lot: from here each cycle raises the cost per kg of \
                 product."
            .to_string(),
        evidence: format!(
            "Economic replacement point: cycle {n} (lowest cost per kg of product); cycles \
             done: {}.\n",
            snap.cycles_done
        ),
    }
}

fn quarantine_rule(q: &QuarantinedFile) -> Verdict {
    Verdict {
        active: Some(Severity::Warning),
        subject: format!("file set aside: {}", q.name),
        action: "Correct or re-export the file and put it in the watched folder again; when a \
                 file of the same name is ingested this notice closes itself."
            .to_string(),
        evidence: format!(
            "File {} was set aside (quarantined) and not ingested.\nReason: {}\n",
            q.name, q.reason
        ),
    }
}

/// The replacement-forecast rule: is the chosen bound of the crossing within the lead, in
/// cycles or (with a cadence and a lead time) in days? Never critical: a forecast is a
/// call to order, the next-batch and below-criterion rules speak of the present.
fn forecast_rule(snap: &LotSnapshot, fc: &Forecast, rules: &AlertRules) -> Verdict {
    let lot = &snap.lot;
    let mut text = String::new();
    let _ = writeln!(
        text,
        "Model {}; criterion {}; cycles done {}.",
        fc.model,
        act(snap.criterion),
        snap.cycles_done
    );
    let quiet = |text: String, why: &str| Verdict {
        active: None,
        subject: format!("{lot}: no replacement forecast within the lead"),
        action: format!("No action needed: {why}."),
        evidence: text,
    };
    let crossing = match fc.status {
        ForecastStatus::NotReached => {
            text.push_str("The criterion is never reached under the fitted model.\n");
            return quiet(text, "the criterion is not reached under the fitted model");
        }
        ForecastStatus::NoSignificantTrend => {
            text.push_str("The loss of activity is not significant: no replacement is forecast.\n");
            return quiet(text, "no significant loss of activity");
        }
        ForecastStatus::Withheld => {
            text.push_str(
                "The trend forecast is withheld after a step change until the new level has \
                 enough cycles.\n",
            );
            return quiet(text, "the forecast is withheld after a step change");
        }
        ForecastStatus::ReachedAlready => {
            text.push_str(
                "The fitted curve is already below the criterion (the newest cycles are judged \
                 by the below-criterion and next-batch rules).\n",
            );
            return Verdict {
                active: Some(Severity::Warning),
                subject: format!("{lot}: fitted trend already at the replacement criterion"),
                action: "Order a replacement lot now and review each batch before charging \
                         this one."
                    .to_string(),
                evidence: text,
            };
        }
        ForecastStatus::Ahead | ForecastStatus::UnboundedInterval => fc.x,
    };
    let Some(x) = crossing.filter(|v| v.is_finite()) else {
        text.push_str("No crossing estimate is available.\n");
        return quiet(text, "no crossing estimate");
    };
    let _ = writeln!(
        text,
        "Forecast crossing at cycle {} ({:.0} % interval {} to {}).",
        cyc(x),
        fc.confidence * 100.0,
        cyc_opt(fc.lower),
        cyc_opt(fc.upper)
    );
    // An unbounded chosen bound falls back to the estimate, and says so.
    let chosen = match rules.forecast_bound {
        ForecastBound::Lower => fc.lower,
        ForecastBound::Estimate => Some(x),
        ForecastBound::Upper => fc.upper,
    };
    let done = f64::from(snap.cycles_done);
    let bound = match chosen.filter(|v| v.is_finite()) {
        // An alert never rests on an interval end in the past.
        Some(v) if v < done => {
            text.push_str("The chosen bound lies before the newest cycle; the estimate is used.\n");
            x.max(done)
        }
        Some(v) => v,
        None => {
            text.push_str("The chosen bound is unbounded; the estimate is used instead.\n");
            x
        }
    };
    let ahead = bound - done;
    let mut within = ahead <= rules.lead_cycles;
    let _ = writeln!(
        text,
        "Cycles left to the {} bound: {}; lead {} cycles.",
        match rules.forecast_bound {
            ForecastBound::Lower => "lower",
            ForecastBound::Estimate => "estimated",
            ForecastBound::Upper => "upper",
        },
        cyc(ahead),
        cyc(rules.lead_cycles)
    );
    let lead_days = rules.lead_days_for(&snap.catalyst);
    if let (Some(days), Some(cpd)) = (lead_days, fc.cycles_per_day)
        && cpd.is_finite()
        && cpd > 0.0
    {
        let days_left = ahead / cpd;
        let _ = writeln!(
            text,
            "Days left at {:.2} cycles per day: {:.0}; lead time {:.0} days.",
            cpd, days_left, days
        );
        within |= days_left <= days;
    }
    if let Some(d) = &fc.dates {
        let _ = writeln!(text, "{}", dates_sentence(d));
    }
    if fc.status == ForecastStatus::UnboundedInterval {
        text.push_str("The interval does not close on the late side: the forecast is uncertain.\n");
    }
    let when = fc.dates.as_ref().and_then(|d| {
        let window = match (&d.crossing_early, &d.crossing_late) {
            (Some(e), Some(l)) if e != l => format!("criterion expected {e} to {l}"),
            (Some(e), _) => format!("criterion expected from {e}"),
            _ => format!("criterion expected about {}", d.crossing_date.as_deref()?),
        };
        Some((d.order_by.clone(), window, d.order_by_passed()))
    });
    let (subject, action) = match when {
        Some((Some(order), window, true)) => (
            format!("{lot}: order replacement now, order-by date {order} passed ({window})"),
            format!(
                "Order a replacement lot now: the order-by date {order} has passed, so the \
                 new lot may not be qualified before this one reaches the criterion."
            ),
        ),
        Some((Some(order), window, false)) => (
            format!("{lot}: order replacement by {order} ({window})"),
            format!(
                "Order a replacement lot by {order} so that it is qualified before this one \
                 reaches the criterion; keep using this lot while the next-batch check is ok."
            ),
        ),
        Some((None, window, _)) => (
            format!("{lot}: plan a replacement ({window})"),
            "Plan a replacement lot; set a lead time for this catalyst to get an order-by date."
                .to_string(),
        ),
        None => (
            format!(
                "{lot}: replacement criterion expected in about {} cycles",
                cyc(ahead.max(0.0))
            ),
            "Plan a replacement lot; batch start times give the forecast dates.".to_string(),
        ),
    };
    Verdict {
        active: within.then_some(Severity::Warning),
        subject,
        action,
        evidence: text,
    }
}

/// The crossing's dates in one sentence.
pub fn dates_sentence(d: &crate::model::calendar::CrossingDates) -> String {
    let zone = d.time_zone.as_deref().unwrap_or("UTC");
    let mut s = format!(
        "Criterion expected about {}",
        d.crossing_date.as_deref().unwrap_or("—")
    );
    if let Some(e) = &d.crossing_early {
        let _ = write!(
            s,
            " (interval {e} to {})",
            d.crossing_late.as_deref().unwrap_or("unbounded")
        );
    }
    if let (Some(o), Some(l)) = (&d.order_by, d.lead_days) {
        let _ = write!(s, "; order by {o} ({l:.0} days' lead time)");
    }
    let _ = write!(s, "; dates in {zone}.");
    s
}

#[cfg(test)]
mod tests {
    use super::*;

    pub(crate) fn snapshot() -> LotSnapshot {
        LotSnapshot {
            lot: "PD-17".into(),
            catalyst: "5% Pd/C".into(),
            metal: "Pd".into(),
            site: "North".into(),
            cycles_done: 6,
            latest_activity: Some(0.8),
            criterion: 0.6,
            forecast: None,
            next_batch: None,
            abrupt: None,
            metal_in_product: None,
            metal_loss_fraction: None,
            economic_cycle: None,
            quarantined: vec![],
            evidence: vec![EvidenceRow {
                cycle: 1,
                value: 1.0,
                source_file: "a.csv".into(),
                sha256: "00".into(),
            }],
        }
    }

    fn rules() -> AlertRules {
        AlertRules {
            recipients: Recipients {
                chemists: vec!["chem@example.org".into()],
                qa: vec!["qa@example.org".into()],
                managers: vec!["boss@example.org".into(), "CHEM@example.org".into()],
            },
            ..AlertRules::default()
        }
    }

    fn forecast(status: ForecastStatus, x: f64, lo: Option<f64>, hi: Option<f64>) -> Forecast {
        Forecast {
            status,
            x: Some(x),
            lower: lo,
            upper: hi,
            confidence: 0.95,
            model: "first-order".into(),
            cycles_per_day: None,
            dates: None,
        }
    }

    fn only(alerts: &[Alert], rule: RuleId) -> &Alert {
        let v: Vec<_> = alerts.iter().filter(|a| a.rule == rule).collect();
        assert_eq!(v.len(), 1, "{rule:?} in {alerts:?}");
        v[0]
    }

    #[test]
    fn forecast_within_lead_uses_lower_bound() {
        let mut s = snapshot();
        // estimate 10 (4 ahead, outside lead 3), lower 8.5 (2.5 ahead, inside).
        s.forecast = Some(forecast(ForecastStatus::Ahead, 10.0, Some(8.5), Some(12.0)));
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::ReplacementForecast);
        assert_eq!(f.state, AlertState::Open);
        assert_eq!(f.severity, Severity::Warning);
        assert_eq!(f.key, "replacement-forecast|PD-17");
        assert!(f.evidence.contains("8.5"));
        let r = AlertRules {
            forecast_bound: ForecastBound::Estimate,
            ..rules()
        };
        let f2 = evaluate(&s, &r);
        assert_eq!(
            only(&f2, RuleId::ReplacementForecast).state,
            AlertState::Cleared
        );
    }

    #[test]
    fn forecast_lead_in_days_and_critical_when_next_cycle() {
        let mut s = snapshot();
        let mut fc = forecast(ForecastStatus::Ahead, 16.0, Some(14.0), Some(18.0));
        fc.cycles_per_day = Some(1.0);
        s.forecast = Some(fc);
        let mut r = rules();
        assert_eq!(
            only(&evaluate(&s, &r), RuleId::ReplacementForecast).state,
            AlertState::Cleared
        );
        r.lead_days = Some(10.0); // 8 cycles left at 1/day = 8 days ≤ 10
        assert_eq!(
            only(&evaluate(&s, &r), RuleId::ReplacementForecast).state,
            AlertState::Open
        );
        // Half a cycle left: still a warning. A forecast is a call to order; what is
        // critical now is judged by the below-criterion and next-batch rules.
        s.forecast = Some(forecast(ForecastStatus::Ahead, 7.5, Some(6.5), Some(9.0)));
        let a = evaluate(&s, &rules());
        assert_eq!(
            only(&a, RuleId::ReplacementForecast).severity,
            Severity::Warning
        );
    }

    #[test]
    fn order_by_dates_in_subject_and_a_passed_date_says_now() {
        let mut s = snapshot();
        let mut fc = forecast(ForecastStatus::Ahead, 8.0, Some(7.5), Some(9.0));
        fc.dates = Some(crate::model::calendar::CrossingDates {
            crossing_date: Some("2027-01-28".into()),
            crossing_early: Some("2027-01-26".into()),
            crossing_late: Some("2027-02-06".into()),
            order_by: Some("2027-01-14".into()),
            days_left: Some(12.0),
            cycles_per_day: Some(0.125),
            lead_days: Some(12.0),
            time_zone: Some("Europe/Berlin".into()),
            as_of: Some("2027-01-10".into()),
        });
        s.forecast = Some(fc.clone());
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::ReplacementForecast);
        assert_eq!(
            f.subject,
            "PD-17: order replacement by 2027-01-14 (criterion expected 2027-01-26 to 2027-02-06)"
        );
        assert!(
            f.action
                .starts_with("Order a replacement lot by 2027-01-14")
        );
        if let Some(d) = fc.dates.as_mut() {
            d.as_of = Some("2027-01-15".into());
        }
        s.forecast = Some(fc);
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::ReplacementForecast);
        assert!(
            f.subject
                .starts_with("PD-17: order replacement now, order-by date 2027-01-14 passed"),
            "{}",
            f.subject
        );
        assert_eq!(f.severity, Severity::Warning);
    }

    #[test]
    fn forecast_not_reached_and_unbounded() {
        let mut s = snapshot();
        s.forecast = Some(Forecast {
            status: ForecastStatus::NotReached,
            x: None,
            lower: None,
            upper: None,
            confidence: 0.95,
            model: "residual".into(),
            cycles_per_day: None,
            dates: None,
        });
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::ReplacementForecast);
        assert_eq!(f.state, AlertState::Cleared);
        assert!(f.evidence.contains("never reached"));
        s.forecast = Some(forecast(ForecastStatus::UnboundedInterval, 8.0, None, None));
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::ReplacementForecast);
        assert_eq!(f.state, AlertState::Open);
        assert!(f.evidence.contains("unbounded"));
    }

    #[test]
    fn below_criterion() {
        let mut s = snapshot();
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::BelowCriterion).state,
            AlertState::Cleared
        );
        s.latest_activity = Some(0.55);
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::BelowCriterion);
        assert_eq!(
            (f.state, f.severity),
            (AlertState::Open, Severity::Critical)
        );
        // chemists then managers, case-insensitive duplicate dropped
        assert_eq!(f.recipients, vec!["chem@example.org", "boss@example.org"]);
        s.latest_activity = Some(f64::NAN);
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::BelowCriterion).state,
            AlertState::Cleared
        );
    }

    #[test]
    fn abrupt_loss_severity() {
        let mut s = snapshot();
        s.abrupt = Some(AbruptLoss {
            flagged: true,
            newest: 0.5,
            pi_lower: 0.7,
            pi_upper: 0.9,
            cusum: 2.0,
            h: 4.0,
            hints: vec!["Cycle 6 differs from the 5 cycles before it in: temperature".into()],
        });
        // A detected step is critical whichever check found it, and critical alerts
        // reach the managers as well as the chemists.
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::AbruptLoss);
        assert_eq!(
            (f.state, f.severity),
            (AlertState::Open, Severity::Critical)
        );
        assert_eq!(f.recipients, vec!["chem@example.org", "boss@example.org"]);
        if let Some(ab) = s.abrupt.as_mut() {
            ab.cusum = 5.0;
        }
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::AbruptLoss).severity,
            Severity::Critical
        );
        if let Some(ab) = s.abrupt.as_mut() {
            ab.flagged = false;
        }
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::AbruptLoss).state,
            AlertState::Cleared
        );
    }

    #[test]
    fn metal_in_product_levels_and_source() {
        let mut s = snapshot();
        let m = |v| MetalInProduct {
            cycle: 6,
            ug_per_g: v,
            limit_ug_per_g: 10.0,
            limit_source: LimitSource::IchQ3dRecalled,
        };
        s.metal_in_product = Some(m(5.0));
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::MetalInProduct).state,
            AlertState::Cleared
        );
        s.metal_in_product = Some(m(8.5));
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::MetalInProduct);
        assert_eq!(f.severity, Severity::Warning);
        assert!(f.evidence.contains("recalled from memory"));
        assert_eq!(f.recipients, vec!["qa@example.org", "chem@example.org"]);
        s.metal_in_product = Some(m(12.0));
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::MetalInProduct).severity,
            Severity::Critical
        );
    }

    #[test]
    fn metal_loss_fraction() {
        let mut s = snapshot();
        s.metal_loss_fraction = Some(0.049);
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::MetalLoss).state,
            AlertState::Cleared
        );
        s.metal_loss_fraction = Some(0.051);
        let a = evaluate(&s, &rules());
        assert_eq!(only(&a, RuleId::MetalLoss).state, AlertState::Open);
        assert!(only(&a, RuleId::MetalLoss).evidence.contains("5.10 %"));
    }

    #[test]
    fn economic_point() {
        let mut s = snapshot();
        s.economic_cycle = Some(7);
        assert_eq!(
            only(&evaluate(&s, &rules()), RuleId::EconomicPoint).state,
            AlertState::Cleared
        );
        s.economic_cycle = Some(6);
        let a = evaluate(&s, &rules());
        let f = only(&a, RuleId::EconomicPoint);
        assert_eq!(f.state, AlertState::Open);
        assert_eq!(f.recipients, vec!["boss@example.org", "CHEM@example.org"]);
    }

    #[test]
    fn quarantine_one_alert_per_file_to_qa() {
        let mut s = snapshot();
        s.quarantined = vec![
            QuarantinedFile {
                name: "x.csv".into(),
                reason: "line 3: missing column".into(),
            },
            QuarantinedFile {
                name: "y.csv".into(),
                reason: "not UTF-8".into(),
            },
        ];
        let a: Vec<_> = evaluate(&s, &rules())
            .into_iter()
            .filter(|a| a.rule == RuleId::Quarantine)
            .collect();
        assert_eq!(a.len(), 2);
        assert_eq!(a[0].key, "quarantine|PD-17|x.csv");
        assert_eq!(a[1].recipients, vec!["qa@example.org"]);
    }

    #[test]
    fn switches_and_site_overrides() {
        let mut s = snapshot();
        s.latest_activity = Some(0.1);
        let mut r = rules();
        r.rules.below_criterion = false;
        assert!(
            evaluate(&s, &r)
                .iter()
                .all(|a| a.rule != RuleId::BelowCriterion)
        );
        let r: AlertRules = toml::from_str(
            r#"
            lead_cycles = 2
            digest = "weekly mon 07:00"
            [recipients]
            chemists = ["c@example.org"]
            managers = ["m@example.org"]
            [sites.North]
            managers = ["north-m@example.org"]
            "#,
        )
        .unwrap();
        let a = evaluate(&s, &r);
        assert_eq!(
            only(&a, RuleId::BelowCriterion).recipients,
            vec!["c@example.org", "north-m@example.org"]
        );
        assert!(matches!(r.digest, Some(DigestSchedule::Weekly { .. })));
        assert!(toml::from_str::<AlertRules>("lead_cycle = 2").is_err());
        assert!(toml::from_str::<AlertRules>("digest = \"hourly\"").is_err());
        assert!(r.problems().is_empty());
    }

    #[test]
    fn problems_are_reported() {
        let mut r = rules();
        assert!(r.problems().is_empty());
        r.lead_cycles = -1.0;
        r.metal_loss_limit = 2.0;
        r.recipients.qa.push("not an address".into());
        r.sites.insert(
            "South".into(),
            SiteRecipients {
                managers: Some(vec!["x@".into()]),
                ..SiteRecipients::default()
            },
        );
        let p = r.problems();
        assert_eq!(p.len(), 4, "{p:?}");
        assert!(p[3].starts_with("alerts.sites.South"));
    }
}
