//! Alerts: who must act on a lot, and getting the message to them exactly once.
//!
//! - [`rules`]: pure rules from a [`rules::LotSnapshot`] and the `[alerts]` section to
//!   [`rules::Alert`]s (open or cleared, with severity, evidence and recipients).
//! - [`compose`]: plain-text and HTML message parts with the safety cautions; every piece
//!   of export text is made safe for headers and escaped for HTML.
//! - [`outbox`]: the durable outbox, written in the caller's transaction so an alert exists
//!   if and only if the records that raised it were committed.
//! - [`mailer`]: delivery from the outbox (SMTP or `.eml` files) with backoff.
//! - [`digest`]: the periodic summary for managers and its schedule.

pub mod compose;
pub mod digest;
pub mod mailer;
pub mod outbox;
pub mod rules;

pub use compose::{ComposedMessage, compose_alert};
pub use digest::{DigestSchedule, compose_digest, next_digest_due};
pub use mailer::{DeliveryReport, MailConfig, deliver_due, run_mailer};
pub use outbox::enqueue;
pub use rules::{Alert, AlertRules, AlertState, LotSnapshot, Severity, evaluate};

/// Errors of the outbox and the mailer.
#[derive(Debug, thiserror::Error)]
pub enum AlertError {
    #[error("outbox database: {0}")]
    Db(#[from] rusqlite::Error),
    #[error("invalid timestamp {0:?}: expected RFC 3339")]
    Time(String),
    #[error("stored outbox row {id} is damaged: {what}")]
    Corrupt { id: i64, what: String },
    #[error("mail configuration: {0}")]
    Config(String),
    #[error("invalid mail address {addr:?}: {reason}")]
    Address { addr: String, reason: String },
    #[error("building message: {0}")]
    Build(String),
    #[error("writing {path}: {source}")]
    Io {
        path: std::path::PathBuf,
        source: std::io::Error,
    },
    #[error("background task failed: {0}")]
    Join(String),
}
