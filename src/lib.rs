//! turnbook: a lab notebook that keeps itself, for catalysts reused over many batches.
//!
//! The crate is a functional core with a thin shell:
//!
//! - [`chem`]: TON, TOF, apparent rate constants, activity, Arrhenius, metal leaching. Pure.
//! - [`fit`]: least-squares engine, deactivation models, AICc choice, forecasts. Pure.
//! - [`ingest`]: decoding export files and reading them through export profiles. Pure.
//! - [`alert`]: alert rules (pure), the durable outbox and the mailer.
//! - [`alerting`]: from a lot's state to the alert rules and the outbox.
//! - [`report`]: self-contained HTML, CSV and SVG reports.
//! - [`config`]: the TOML configuration and its validation.
//! - [`store`]: SQLite schema migrations, queries and transactions.
//! - [`audit`]: the hash chain over the event log and its verification.
//! - [`analysis`]: lot metrics, fits and alerts recomputed when records change.
//! - [`pipeline`]: one file from bytes to committed records (hash, parse, merge, store).
//! - [`service`]: the long-running watcher and mailer around the pipeline.
//! - [`watch`]: folder events, polling, settling and start-up catch-up.
//! - [`views`]: status, history and sign-off fingerprints for people and scripts.
//! - [`demo`]: the invented demonstration plant.
//! - [`commands`]: the command-line verbs, called by `main.rs`.

pub mod alert;
pub mod alerting;
pub mod analysis;
pub mod audit;
pub mod chem;
pub mod commands;
pub mod config;
pub mod demo;
mod demo_live;
pub mod fit;
pub mod fitcmd;
pub mod ingest;
pub mod mail;
pub mod model;
pub mod pipeline;
pub mod report;
pub mod reportcmd;
pub mod service;
pub mod store;
pub mod views;
pub mod watch;
