//! The plain data a report is rendered from.
//!
//! The shell (database, audit chain, fitting) fills these structures; the renderers in
//! this module only read them. Keeping them plain (no database handles, no clock) makes
//! every report reproducible from its JSON form, which is also what QA can archive.

use serde::{Deserialize, Serialize};

use crate::model::{LotRecord, Quantity};

/// Everything one lot's QA report shows.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotReport {
    /// When the report was generated, as the shell formats it (ISO 8601 recommended).
    pub generated_at: String,
    /// The turnbook version that generated it, e.g. `env!("CARGO_PKG_VERSION")`.
    pub turnbook_version: String,
    pub identity: LotIdentity,
    /// One line per cycle, in the order they should be shown (usually by cycle number).
    pub cycles: Vec<CycleLine>,
    /// The deactivation fit, when one could be made.
    pub fit: Option<FitSummary>,
    pub alerts: Vec<AlertLine>,
    pub corrections: Vec<CorrectionLine>,
    pub signoffs: Vec<SignOffLine>,
    /// The result of the last audit-chain verification, when one ran.
    pub verify: Option<VerifyLine>,
    /// Site-specific cautions shown in addition to the fixed ones
    /// ([`crate::report::FIXED_CAUTIONS`]).
    pub cautions: Vec<String>,
    /// "Why did it drop?" hints for a step loss or a fast decline, one sentence each.
    #[serde(default)]
    pub cause_hints: Vec<String>,
    /// How activity was computed for this lot; absent in reports made before it was stated.
    #[serde(default)]
    pub activity_note: Option<ActivityNote>,
    /// A young lot's forecast with its family's prior, beside the lot-alone one.
    #[serde(default)]
    pub family: Option<FamilyForecast>,
    /// Notes people wrote on the lot and its batches, oldest first.
    #[serde(default)]
    pub notes: Vec<NoteLine>,
    /// Where the lot stands with QA, from its sign-offs and its history as it stands.
    #[serde(default)]
    pub signoff_state: crate::model::signoff::SignOffState,
}

/// How the lot's activity is defined: its basis and the cycle it is relative to.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct ActivityNote {
    /// The configuration's name of the basis, e.g. "catalyst-ratio".
    pub basis: String,
    /// The definition in words.
    pub definition: String,
    /// The cycle whose rate is activity 1.
    pub reference_cycle: Option<u32>,
    /// True when cycle 1 is censored and a later, uncensored cycle is the reference.
    pub reference_moved: bool,
}

/// A young lot's forecast with the prior its family's earlier lots give it, and without.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FamilyForecast {
    /// The earlier lots the prior came from.
    pub lots: Vec<String>,
    /// True when too few lots existed to estimate the spread between lots (assumed).
    pub spread_assumed: bool,
    /// Share of the deactivation rate's information that comes from the lot's own cycles.
    pub own_share: Option<f64>,
    /// True when the pooled forecast is the lot's forecast.
    pub headline: bool,
    pub with_prior: Option<Forecast>,
    pub lot_alone: Option<Forecast>,
}

/// A note on the lot or one of its batches.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct NoteLine {
    pub at: String,
    pub who: String,
    /// What it is on, e.g. "lot PD-7" or "batch KV4-H-005".
    pub on: String,
    pub text: String,
}

/// Who the lot is and where it came from: its registration (the one record the whole
/// notebook keeps of a lot) and the currency its cost is in.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct LotIdentity {
    pub record: LotRecord,
    /// Currency code the cost is in, e.g. "EUR".
    pub currency: Option<String>,
}

/// One cycle of the lot as the cycle table shows it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct CycleLine {
    pub cycle_no: u32,
    pub batch_id: String,
    /// Batch start as recorded (ISO 8601 local plant time).
    pub started_at: Option<String>,
    /// Measured values, each in the canonical unit of its quantity.
    pub values: Vec<ReportValue>,
    /// Turnover number, mol product per mol metal charged (dimensionless).
    pub ton: Option<f64>,
    /// Average turnover frequency, TON / whole reaction time, h⁻¹.
    pub tof_per_h: Option<f64>,
    /// Apparent first-order rate constant, h⁻¹.
    pub k_app_per_h: Option<f64>,
    /// Activity relative to the reference cycle (dimensionless), on the basis the
    /// report's [`ActivityNote`] states.
    pub activity: Option<f64>,
    /// Standard error of activity (first order, reference included), when the assay's σ
    /// is known.
    #[serde(default)]
    pub activity_se: Option<f64>,
    /// Initial TOF, k_app × mol substrate / mol metal, h⁻¹; a lower bound when censored.
    #[serde(default)]
    pub tof_initial_per_h: Option<f64>,
    /// TON per mol of metal available to the cycle (charged less earlier losses).
    #[serde(default)]
    pub ton_per_metal_available: Option<f64>,
    /// Metal charged (nominal) and available to the cycle, mmol.
    #[serde(default)]
    pub metal_charged_mmol: Option<f64>,
    #[serde(default)]
    pub metal_available_mmol: Option<f64>,
    pub flags: CycleFlags,
    /// The files the cycle's values came from.
    pub sources: Vec<SourceRef>,
}

impl CycleLine {
    /// The value of one quantity, if measured. When a quantity appears twice the first
    /// one wins (the shell resolves conflicts and flags them).
    pub fn value(&self, q: Quantity) -> Option<f64> {
        self.values
            .iter()
            .find(|v| v.quantity == q)
            .map(|v| v.value)
    }
}

/// One measured value in its quantity's canonical unit ([`Quantity::canonical_unit`]).
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ReportValue {
    pub quantity: Quantity,
    pub value: f64,
}

/// States of a cycle record that a reader must see next to its numbers.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq, Serialize, Deserialize)]
pub struct CycleFlags {
    /// Conversion at or above the saturation limit: activity is a lower bound.
    pub censored: bool,
    /// Some instruments have not reported yet.
    pub pending: bool,
    /// Two sources disagree on a value.
    pub conflict: bool,
    /// Left out of the fit by a person (see corrections).
    pub excluded: bool,
    /// At least one value was corrected after ingestion.
    pub corrected: bool,
    /// The catalyst-to-substrate ratio differs from the lot's usual one.
    #[serde(default)]
    pub ratio_off_usual: bool,
}

impl CycleFlags {
    /// The set flags as words, in a fixed order.
    pub fn words(&self) -> Vec<&'static str> {
        let mut w = Vec::new();
        if self.censored {
            w.push("censored");
        }
        if self.pending {
            w.push("pending");
        }
        if self.conflict {
            w.push("conflict");
        }
        if self.excluded {
            w.push("excluded");
        }
        if self.corrected {
            w.push("corrected");
        }
        if self.ratio_off_usual {
            w.push("ratio-off-usual");
        }
        w
    }
}

/// Where a value came from: the file (by name and content hash) and the line in it.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SourceRef {
    pub file_name: String,
    /// SHA-256 of the file's bytes, lowercase hex.
    pub sha256: String,
    /// 1-based line in the decoded file.
    pub line: u64,
}

/// The chosen deactivation model and what it predicts, precomputed by the fit module.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct FitSummary {
    /// The chosen model's id, e.g. "first_order".
    pub model_id: String,
    /// What x is, with unit, e.g. "cycle number" or "time on stream (h)".
    pub x_label: String,
    /// What y is, with unit, e.g. "activity (relative to cycle 1)".
    pub y_label: String,
    pub params: Vec<ParamLine>,
    /// Confidence level of the parameter intervals and the band, e.g. 0.95.
    pub level: f64,
    /// Points the fit used.
    pub observed: Vec<ObservedPoint>,
    /// The fitted curve, already evaluated at enough x to draw it smoothly.
    pub curve: Vec<CurvePoint>,
    /// The confidence band of the curve.
    pub band: Vec<BandPoint>,
    /// The replacement criterion on the y scale, when one is configured.
    pub threshold: Option<f64>,
    pub forecast: Option<Forecast>,
}

/// One fitted parameter with its interval.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct ParamLine {
    pub name: String,
    pub value: f64,
    pub lower: Option<f64>,
    pub upper: Option<f64>,
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct ObservedPoint {
    pub x: f64,
    pub y: f64,
    /// A lower bound only (saturated conversion); drawn as an open triangle.
    pub censored: bool,
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct CurvePoint {
    pub x: f64,
    pub y: f64,
}

#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize)]
pub struct BandPoint {
    pub x: f64,
    pub lower: f64,
    pub upper: f64,
}

/// When the fitted model crosses the replacement criterion.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Forecast {
    pub status: ForecastStatus,
    /// The crossing x*, when there is one.
    pub x: Option<f64>,
    /// Interval bounds on x*; `None` means unbounded on that side.
    pub lower: Option<f64>,
    pub upper: Option<f64>,
    /// Confidence level of the interval, e.g. 0.95.
    pub confidence: f64,
    /// The crossing in dates with the order-by date, in one sentence, when the lot has a
    /// cadence.
    #[serde(default)]
    pub dates: Option<String>,
}

pub use crate::model::ForecastStatus;

/// An alert raised for the lot.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct AlertLine {
    pub raised_at: String,
    pub rule: String,
    pub subject: String,
    /// Still open (not acknowledged or cleared).
    pub open: bool,
}

/// A correction: a new version of a value, with who, when and why.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct CorrectionLine {
    pub at: String,
    pub who: String,
    pub field: String,
    pub old: String,
    pub new: String,
    pub why: String,
}

/// An electronic sign-off of the lot's record.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct SignOffLine {
    pub who: String,
    pub at: String,
    /// What the signature means, e.g. "reviewed" or "approved for reuse".
    pub meaning: String,
    /// SHA-256 of the record state that was signed.
    pub signed_sha256: String,
    /// Whether the signed state is still the current state (no change since).
    pub covers_current: bool,
    /// The roster name signed as; none for sign-offs made before signers were named.
    #[serde(default)]
    pub signer: Option<String>,
    /// The operating-system account it was made from, when recorded.
    #[serde(default)]
    pub os_user: Option<String>,
    /// What the fingerprint covers, e.g. "history of lot X: 12 events up to #40".
    #[serde(default)]
    pub what: String,
    #[serde(default)]
    pub comment: Option<String>,
    /// Events of the lot's history after the sign-off (sign-offs aside), oldest first.
    #[serde(default)]
    pub later_events: Vec<i64>,
}

/// The last audit-chain verification.
#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
pub struct VerifyLine {
    pub ran_at: String,
    pub outcome: VerifyOutcome,
}

#[derive(Debug, Clone, PartialEq, Eq, Serialize, Deserialize)]
#[serde(rename_all = "snake_case")]
pub enum VerifyOutcome {
    /// Every link checked out.
    Intact { entries: u64 },
    /// The first link that did not check out, as the audit module describes it.
    Broken { first_broken: String },
}

/// All lots of a site, for the overview page.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SiteReport {
    pub generated_at: String,
    pub turnbook_version: String,
    pub site: String,
    pub lots: Vec<SiteLotLine>,
    /// Site-specific cautions shown after the fixed ones.
    pub cautions: Vec<String>,
}

/// One lot's line on the site overview.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SiteLotLine {
    pub lot: String,
    pub catalyst: String,
    pub metal: String,
    /// The lot's state as the store names it (e.g. "in service", "retired").
    pub state: String,
    pub cycles: u32,
    pub latest_activity: Option<f64>,
    pub forecast: Option<Forecast>,
    pub open_alerts: u32,
    /// Activity per cycle, oldest first, for the sparkline.
    pub activity_history: Vec<f64>,
    /// The replacement criterion, drawn on the sparkline when set.
    pub threshold: Option<f64>,
}
