//! Alerts: who must act on a lot, and what the message to them says.
//!
//! - `rules`: pure rules from a [`LotSnapshot`] and the `[alerts]` section to
//!   [`Alert`]s (open or cleared, with severity, evidence and recipients).
//! - `compose`: plain-text and HTML message parts with the safety cautions; every piece
//!   of export text is made safe for headers and escaped for HTML.
//! - `lifecycle`: what a verdict does to an alert's remembered condition; message
//!   identity and the retry schedule. The store keeps the conditions and the outbox.
//! - `digest`: the periodic summary for managers; `schedule`: when it is due.
//!
//! Everything here is pure. The durable outbox lives in the store, delivery in
//! `crate::mail`.

mod compose;
mod digest;
mod lifecycle;
mod rules;
mod schedule;

pub use compose::{ComposedMessage, compose_alert, header_safe, html_escape};
pub use digest::{
    AlertChange, DigestInput, DigestLot, DigestPeriod, OpenAlert, RestingLots, compose_digest,
};
pub use lifecycle::{Condition, backoff, decide, message_id_for};
pub use rules::{
    AbruptLoss, Alert, AlertRules, AlertState, EvidenceRow, Forecast, ForecastStatus, LimitSource,
    LotSnapshot, MetalInProduct, NextBatch, NextBatchVerdict, QuarantinedFile, Recipients, RuleId,
    RuleSwitches, Severity, SiteRecipients, dates_sentence, evaluate, recipients_for,
};
pub use schedule::{DigestSchedule, next_digest_due};

/// Errors of composing a message.
#[derive(Debug, thiserror::Error)]
pub enum AlertError {
    #[error("invalid mail address {addr:?}: {reason}")]
    Address { addr: String, reason: String },
    #[error("building message: {0}")]
    Build(String),
}
