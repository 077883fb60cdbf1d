//! The command-line verbs. Each returns an exit status: 0 all done, 1 some input was
//! rejected or a check failed, 2 a usage or configuration error.

use std::io::IsTerminal;
use std::path::{Path, PathBuf};
use std::process::ExitCode;

use clap::{Parser, Subcommand};
use rusqlite::TransactionBehavior;

use crate::audit;
use crate::config::Config;
use crate::model::Payload;
use crate::model::event::LotRecord;
use crate::pipeline::{self, FileOutcome, Ingestor};
use crate::store::{self, records};

/// turnbook: catalyst lots, their cycles, deactivation fits and replacement warnings.
#[derive(Debug, Parser)]
#[command(name = "turnbook", version, about)]
pub struct Cli {
    /// Configuration file.
    #[arg(long, global = true, default_value = "turnbook.toml")]
    pub config: PathBuf,
    /// Log as JSON lines (for journald or a log collector) instead of readable lines; also
    /// set by TURNBOOK_LOG_JSON=true. RUST_LOG filters as usual.
    #[arg(long, global = true, env = "TURNBOOK_LOG_JSON")]
    pub log_json: bool,
    #[command(subcommand)]
    pub command: Command,
}

#[derive(Debug, Subcommand)]
pub enum Command {
    /// Write a demonstration plant into DIR (new or empty) and run turnbook on it.
    Demo {
        #[arg(long)]
        dir: PathBuf,
        /// Skip the live part (the simulated plant writing files while the service runs).
        #[arg(long)]
        no_live: bool,
    },
    /// Ingest export files or folders (a backfill); each content is stored once.
    Ingest {
        #[arg(required = true)]
        paths: Vec<PathBuf>,
        /// Read every file with this export profile, wherever it lies.
        #[arg(long)]
        profile: Option<String>,
        /// Print one JSON object per file instead of a summary.
        #[arg(long)]
        json: bool,
    },
    /// List the catalyst lots with their cycle count, latest activity and flags.
    Lots {
        #[arg(long)]
        json: bool,
    },
    /// Show one lot's cycles: values, TON, TOF, activity, flags, source files.
    Cycles {
        lot: String,
        #[arg(long, value_parser = ["table", "csv", "json"], default_value = "table")]
        format: String,
    },
    /// Register a catalyst lot, or change its registration (an event in the log).
    Register {
        lot: String,
        #[arg(long)]
        catalyst: String,
        /// Element symbol of the active metal, e.g. Pd.
        #[arg(long)]
        metal: String,
        /// Metal loading, wt %.
        #[arg(long)]
        loading: f64,
        /// Catalyst mass charged at the first cycle, g.
        #[arg(long)]
        mass: f64,
        /// Date received, YYYY-MM-DD.
        #[arg(long)]
        received: Option<String>,
        #[arg(long)]
        supplier_lot: Option<String>,
        /// Lot cost net of the refining credit.
        #[arg(long)]
        cost: Option<f64>,
        #[arg(long)]
        site: Option<String>,
        /// Why (required when changing an existing lot).
        #[arg(long)]
        reason: Option<String>,
    },
    /// Correct one value of a batch; the earlier value stays in the history.
    Correct {
        batch: String,
        /// The field, e.g. conversion (canonical units: fraction, s, K, mol, g, µg/g).
        field: String,
        value: f64,
        #[arg(long)]
        reason: String,
    },
    /// Exclude a cycle from fits (its values stay), with the reason.
    Exclude {
        batch: String,
        #[arg(long)]
        reason: String,
        /// Take a previously excluded cycle back into the fits.
        #[arg(long)]
        undo: bool,
    },
    /// Add a note to a lot or a batch.
    Note {
        #[arg(long, required_unless_present = "batch")]
        lot: Option<String>,
        #[arg(long)]
        batch: Option<String>,
        text: String,
    },
    /// Sign off a lot's history as it stands now (reviewed, approved or rejected).
    Signoff {
        lot: String,
        #[arg(long, value_parser = ["reviewed", "approved", "rejected"])]
        meaning: String,
        #[arg(long)]
        comment: Option<String>,
    },
    /// Show every event that concerns a lot, oldest first.
    History {
        lot: String,
        #[arg(long)]
        json: bool,
    },
    /// What the database holds: files, duplicates, quarantine, conflicts, lots needing attention.
    Status {
        #[arg(long)]
        json: bool,
    },
    /// Fit deactivation models to a lot (or to any two-column CSV series) and forecast
    /// when it crosses the replacement criterion.
    Fit {
        /// The lot to fit (omit with --series).
        #[arg(required_unless_present = "series", conflicts_with = "series")]
        lot: Option<String>,
        /// A CSV file with a header row, x in the first column and y in the second.
        #[arg(long)]
        series: Option<PathBuf>,
        /// Model id (linear, first-order, first-order-residual, second-order, power,
        /// two-site, plateau) or auto (choice by AICc).
        #[arg(long, default_value = "auto", requires = "series")]
        model: String,
        /// Start value of a parameter, NAME=VALUE (repeatable).
        #[arg(long = "start", requires = "series")]
        starts: Vec<String>,
        /// The y value to forecast the crossing of.
        #[arg(long, requires = "series")]
        threshold: Option<f64>,
        /// Confidence of the forecast interval.
        #[arg(long, default_value_t = 0.90, requires = "series")]
        confidence: f64,
        #[arg(long)]
        json: bool,
    },
    /// Write a lot's report (self-contained HTML with charts, and CSV), or the site summary.
    Report {
        #[arg(required_unless_present = "site", conflicts_with = "site")]
        lot: Option<String>,
        /// The summary of every lot instead of one lot's report.
        #[arg(long)]
        site: bool,
        /// The HTML file to write.
        #[arg(long)]
        out: PathBuf,
        /// Also write the cycle table as CSV here.
        #[arg(long)]
        csv: Option<PathBuf>,
        /// Show the lot as it stood after this event number (see `history`).
        #[arg(long, conflicts_with = "site")]
        as_of: Option<i64>,
    },
    /// The service: watch the configured export folders, ingest every file once, send alerts.
    Watch,
    /// Deliver the messages waiting in the outbox now (the service does this on its own).
    Mail,
    /// Queue the managers' digest now: every lot's state and forecast, changes, open alerts.
    Digest,
    /// Walk the audit chain and compare every record with the events that wrote it.
    Verify {
        #[arg(long)]
        json: bool,
    },
}

/// Set up tracing: readable lines on a terminal, JSON lines when asked. RUST_LOG filters.
///
/// The service logs each file at info level; one-shot commands only warn, since they print
/// their own summary.
pub fn init_logging(json: bool, service: bool) {
    let default = if service {
        "warn,turnbook=info"
    } else {
        "warn,turnbook=warn"
    };
    let filter = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(default));
    let builder = tracing_subscriber::fmt()
        .with_env_filter(filter)
        .with_writer(std::io::stderr);
    if json {
        builder.json().init();
    } else {
        builder.with_ansi(std::io::stderr().is_terminal()).init();
    }
}

/// A failure with its exit status and the one sentence that goes first on stderr.
#[derive(Debug)]
pub struct Failure {
    pub code: u8,
    pub message: String,
}

impl Failure {
    pub fn usage(m: impl Into<String>) -> Self {
        Failure {
            code: 2,
            message: m.into(),
        }
    }
    pub fn rejected(m: impl Into<String>) -> Self {
        Failure {
            code: 1,
            message: m.into(),
        }
    }
}

impl From<store::StoreError> for Failure {
    fn from(e: store::StoreError) -> Self {
        match e {
            store::StoreError::Invalid(m) => Failure::rejected(m),
            e => Failure {
                code: 1,
                message: e.to_string(),
            },
        }
    }
}

impl From<crate::config::ConfigError> for Failure {
    fn from(e: crate::config::ConfigError) -> Self {
        Failure::usage(e.to_string())
    }
}

impl From<std::io::Error> for Failure {
    fn from(e: std::io::Error) -> Self {
        Failure {
            code: 1,
            message: format!("input/output error: {e}"),
        }
    }
}

impl From<serde_json::Error> for Failure {
    fn from(e: serde_json::Error) -> Self {
        Failure {
            code: 1,
            message: format!("cannot write JSON: {e}"),
        }
    }
}

pub type CmdResult = Result<u8, Failure>;

/// Run a parsed command line.
pub fn run(cli: Cli) -> ExitCode {
    let result = dispatch(&cli);
    match result {
        Ok(code) => ExitCode::from(code),
        Err(f) => {
            eprintln!("turnbook: {}", f.message);
            ExitCode::from(f.code)
        }
    }
}

fn load(cli: &Cli) -> Result<Config, Failure> {
    Ok(Config::load(&cli.config)?)
}

fn dispatch(cli: &Cli) -> CmdResult {
    match &cli.command {
        Command::Demo { dir, no_live } => crate::demo::run(dir, !*no_live),
        Command::Ingest {
            paths,
            profile,
            json,
        } => ingest(load(cli)?, paths, profile.clone(), *json),
        Command::Lots { json } => crate::views::lots(&load(cli)?, *json),
        Command::Cycles { lot, format } => crate::views::cycles(&load(cli)?, lot, format),
        Command::Register {
            lot,
            catalyst,
            metal,
            loading,
            mass,
            received,
            supplier_lot,
            cost,
            site,
            reason,
        } => {
            let cfg = load(cli)?;
            let rec = LotRecord {
                lot: lot.clone(),
                catalyst: catalyst.clone(),
                metal: metal.clone(),
                loading_wt_pct: *loading,
                charged_mass_g: *mass,
                received: received.clone(),
                supplier_lot: supplier_lot.clone(),
                cost: *cost,
                site: site.clone(),
            };
            register(&cfg, &rec, reason.as_deref())
        }
        Command::Correct {
            batch,
            field,
            value,
            reason,
        } => {
            let cfg = load(cli)?;
            write_event(&cfg, |tx, actor, at| {
                let lot = records::cycle(tx, batch)?.and_then(|c| c.lot);
                let seq = records::correct(tx, batch, field, *value, reason, actor, at)?;
                if let Some(l) = lot {
                    crate::analysis::recompute_lots(tx, &cfg, &[l].into(), actor)?;
                }
                Ok(format!(
                    "correction recorded as event {seq}: batch '{batch}', {field} = {value}"
                ))
            })
        }
        Command::Exclude {
            batch,
            reason,
            undo,
        } => {
            let cfg = load(cli)?;
            write_event(&cfg, |tx, actor, at| {
                let lot = records::cycle(tx, batch)?.and_then(|c| c.lot);
                let seq = records::set_excluded(tx, batch, !*undo, reason, actor, at)?;
                if let Some(l) = lot {
                    crate::analysis::recompute_lots(tx, &cfg, &[l].into(), actor)?;
                }
                let what = if *undo {
                    "taken back into the fits"
                } else {
                    "excluded from the fits"
                };
                Ok(format!("batch '{batch}' {what} (event {seq})"))
            })
        }
        Command::Note { lot, batch, text } => {
            let cfg = load(cli)?;
            write_event(&cfg, |tx, actor, at| {
                let subject = lot.clone().or_else(|| batch.clone()).unwrap_or_default();
                let p = Payload::Note {
                    lot: lot.clone(),
                    batch_id: batch.clone(),
                    text: text.clone(),
                };
                let seq = records::append_event(tx, &subject, &p, actor, at)?;
                Ok(format!("note recorded as event {seq}"))
            })
        }
        Command::Signoff {
            lot,
            meaning,
            comment,
        } => {
            let cfg = load(cli)?;
            write_event(&cfg, |tx, actor, at| {
                let (what, sha) = crate::views::lot_fingerprint(tx, lot)?;
                let p = Payload::SignOff {
                    lot: lot.clone(),
                    meaning: meaning.clone(),
                    signed_sha256: sha.clone(),
                    what,
                    comment: comment.clone(),
                };
                let seq = records::append_event(tx, lot, &p, actor, at)?;
                Ok(format!(
                    "lot '{lot}' signed off as {meaning} by {actor} (event {seq}); it covers the history with SHA-256 {sha}"
                ))
            })
        }
        Command::History { lot, json } => crate::views::history(&load(cli)?, lot, *json),
        Command::Status { json } => crate::views::status(&load(cli)?, *json),
        Command::Verify { json } => verify(&load(cli)?, *json),
        Command::Watch => crate::service::watch_command(&load(cli)?),
        Command::Mail => crate::service::mail_command(&load(cli)?),
        Command::Digest => crate::service::digest_command(&load(cli)?),
        Command::Report {
            lot,
            site,
            out,
            csv,
            as_of,
        } => crate::reportcmd::run(
            &load(cli)?,
            lot.as_deref(),
            *site,
            *as_of,
            out,
            csv.as_deref(),
        ),
        Command::Fit {
            lot,
            series,
            model,
            starts,
            threshold,
            confidence,
            json,
        } => match (lot, series) {
            (_, Some(file)) => {
                crate::fitcmd::series(file, model, starts, *threshold, *confidence, *json)
            }
            (Some(lot), None) => crate::fitcmd::lot(&load(cli)?, lot, *json),
            (None, None) => Err(Failure::usage("give a LOT or --series FILE")),
        },
    }
}

/// Open the database, run one unit of work in an immediate transaction, print its message.
fn write_event(
    cfg: &Config,
    work: impl FnOnce(&rusqlite::Transaction<'_>, &str, &str) -> store::Result<String>,
) -> CmdResult {
    let mut conn = store::open(&cfg.database_path())?;
    let actor = audit::actor(cfg.actor.as_deref());
    let at = crate::model::time::now_utc();
    let tx = conn
        .transaction_with_behavior(TransactionBehavior::Immediate)
        .map_err(store::StoreError::from)?;
    let msg = work(&tx, &actor, &at)?;
    tx.commit().map_err(store::StoreError::from)?;
    println!("{msg}");
    Ok(0)
}

fn register(cfg: &Config, rec: &LotRecord, reason: Option<&str>) -> CmdResult {
    if crate::chem::molar_mass(&rec.metal).is_none() {
        return Err(Failure::usage(format!(
            "--metal '{}' is not an element turnbook knows; expected a symbol such as Pd, Pt, Rh, Ru, Ni",
            rec.metal
        )));
    }
    if !(rec.loading_wt_pct > 0.0 && rec.loading_wt_pct <= 100.0) {
        return Err(Failure::usage(
            "--loading: expected a metal loading in wt % between 0 and 100",
        ));
    }
    if !(rec.charged_mass_g.is_finite() && rec.charged_mass_g > 0.0) {
        return Err(Failure::usage(
            "--mass: expected the catalyst mass charged, g, greater than 0",
        ));
    }
    if let Some(d) = &rec.received
        && chrono::NaiveDate::parse_from_str(d, "%Y-%m-%d").is_err()
    {
        return Err(Failure::usage(format!(
            "--received '{d}': expected a date YYYY-MM-DD"
        )));
    }
    write_event(cfg, |tx, actor, at| {
        let exists = records::lot(tx, &rec.lot)?.is_some();
        if exists && reason.is_none() {
            return Err(store::StoreError::Invalid(format!(
                "lot '{}' is already registered; give --reason to change its registration",
                rec.lot
            )));
        }
        let seq = records::register_lot(tx, rec, reason, actor, at)?;
        crate::analysis::recompute_lots(tx, cfg, &[rec.lot.clone()].into(), actor)?;
        let verb = if exists { "changed" } else { "registered" };
        Ok(format!("lot '{}' {verb} (event {seq})", rec.lot))
    })
}

fn ingest(cfg: Config, paths: &[PathBuf], profile: Option<String>, json: bool) -> CmdResult {
    if let Some(p) = &profile
        && !cfg.profiles.contains_key(p)
    {
        return Err(Failure::usage(format!(
            "--profile '{p}' is not defined; expected one of: {}",
            cfg.profiles.keys().cloned().collect::<Vec<_>>().join(", ")
        )));
    }
    let mut files = Vec::new();
    for p in paths {
        pipeline::collect_files(p, &mut files)
            .map_err(|e| Failure::usage(format!("cannot read {}: {e}", p.display())))?;
    }
    let mut ing = Ingestor::open(cfg)?;
    ing.profile_override = profile;
    let bar = progress_bar(files.len() as u64, json);
    let summary = ing.ingest_paths(&files, |o| {
        bar.inc(1);
        if json {
            if let Ok(s) = serde_json::to_string(o) {
                println!("{s}");
            }
        } else if let FileOutcome::Rejected { path, error, .. } = o {
            bar.suspend(|| eprintln!("rejected {}: {}", printable(path), printable(error)));
        }
    })?;
    bar.finish_and_clear();
    if !json {
        println!(
            "{} files: {} ingested, {} duplicates, {} rejected; rows: {} new, {} already recorded, {} conflicting",
            files.len(),
            summary.ingested,
            summary.duplicates,
            summary.rejected,
            summary.rows_new,
            summary.rows_known,
            summary.rows_conflict
        );
        for c in &summary.conflicts {
            println!("conflict kept and flagged: {}", printable(c));
        }
    }
    Ok(if summary.rejected > 0 { 1 } else { 0 })
}

/// A progress bar on a terminal; hidden when stderr is not one, or JSON is printed.
pub fn progress_bar(len: u64, quiet: bool) -> indicatif::ProgressBar {
    if quiet || !std::io::stderr().is_terminal() {
        return indicatif::ProgressBar::hidden();
    }
    let bar = indicatif::ProgressBar::new(len);
    if let Ok(style) =
        indicatif::ProgressStyle::with_template("{bar:40} {pos}/{len} files {per_sec} {eta}")
    {
        bar.set_style(style);
    }
    bar
}

fn verify(cfg: &Config, json: bool) -> CmdResult {
    let conn = store::open(&cfg.database_path())?;
    let report = audit::verify(&conn)?;
    if json {
        println!("{}", serde_json::to_string_pretty(&report)?);
    } else if report.ok() {
        println!(
            "verified: {} events, chain intact, every record matches the events that wrote it; head {}",
            report.events, report.head_hash
        );
    } else {
        println!("NOT VERIFIED: {}", report.findings[0]);
        for f in report.findings.iter().skip(1).take(20) {
            println!("  also: {f}");
        }
    }
    Ok(if report.ok() { 0 } else { 1 })
}

/// Text from a file or a file name, with control characters shown escaped so a terminal
/// displays them instead of obeying them.
pub fn printable(s: &str) -> String {
    s.chars()
        .map(|c| {
            if c.is_control() {
                c.escape_default().to_string()
            } else {
                c.to_string()
            }
        })
        .collect()
}

/// Resolve a path argument for messages.
pub fn shown(p: &Path) -> String {
    p.display().to_string()
}

impl Command {
    /// Long-running commands log every unit of work at info level.
    pub fn is_service(&self) -> bool {
        matches!(self, Command::Watch)
    }
}

impl From<rusqlite::Error> for Failure {
    fn from(e: rusqlite::Error) -> Self {
        Failure {
            code: 1,
            message: format!("database error: {e}"),
        }
    }
}
