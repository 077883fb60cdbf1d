//! Alerts: who must act on a lot, and what the message to them says.
//!
//! - [`rules`]: pure rules from a [`rules::LotSnapshot`] and the `[alerts]` section to
//!   [`rules::Alert`]s (open or cleared, with severity, evidence and recipients).
//! - [`compose`]: plain-text and HTML message parts with the safety cautions; every piece
//!   of export text is made safe for headers and escaped for HTML.
//! - [`lifecycle`]: what a verdict does to an alert's remembered condition; message
//!   identity and the retry schedule. The store keeps the conditions and the outbox.
//! - [`digest`]: the periodic summary for managers; [`schedule`]: when it is due.
//!
//! Everything here is pure. The durable outbox lives in the store, delivery in
//! `crate::mail`.

pub mod compose;
pub mod digest;
pub mod lifecycle;
pub mod rules;
pub mod schedule;

pub use compose::{ComposedMessage, compose_alert};
pub use digest::compose_digest;
pub use rules::{Alert, AlertRules, AlertState, LotSnapshot, Severity, evaluate};
pub use schedule::{DigestSchedule, next_digest_due};

/// Errors of composing a message.
#[derive(Debug, thiserror::Error)]
pub enum AlertError {
    #[error("invalid mail address {addr:?}: {reason}")]
    Address { addr: String, reason: String },
    #[error("building message: {0}")]
    Build(String),
}
