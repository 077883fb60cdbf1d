//! turnbook: a lab notebook that keeps itself, for catalysts reused over many batches.
//!
//! Layers, each using only those below it:
//!
//! - [`cli`]: the command line, the only code that prints or decides exit statuses.
//! - [`web`]: the service's read-only pages, JSON API, live events, health and metrics.
//! - [`notebook`]: the application: ingestion, lot state, entries, history, reports, the
//!   service. Does the work and returns data.
//! - [`watch`]: folder events, polling, settling and start-up catch-up.
//! - [`mail`]: delivery of the outbox by SMTP or to `.eml` files.
//! - [`audit`]: verification of the audit trail against every stored record.
//! - [`store`]: all SQL: opening, migrations, writes, queries, the outbox.
//! - [`config`]: the TOML configuration and its validation.
//! - [`chem`], [`fit`], [`ingest`], [`report`], [`alert`]: the pure core: chemistry,
//!   deactivation fits and forecasts, reading exports, rendering reports, alert rules and
//!   messages. No I/O, no clock, no database.
//! - [`modes`]: the file and folder modes of what turnbook writes.
//! - [`model`]: the shared vocabulary: quantities, event payloads, a cycle's view, the
//!   chain's link rule, timestamps.

pub mod alert;
pub mod audit;
pub mod chem;
pub mod cli;
pub mod config;
pub mod fit;
pub mod ingest;
pub mod logs;
pub mod mail;
pub mod model;
pub mod modes;
pub mod notebook;
pub mod report;
pub mod store;
pub mod watch;
pub mod web;
