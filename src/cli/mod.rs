//! The command line: the only code that prints or decides exit statuses.
//!
//! Arguments are parsed into typed values by clap; [`run`] dispatches each verb, one line
//! each, to a function that calls the notebook and prints what it returns. Exit statuses:
//! 0 all done, 1 some input was refused or a check failed, 2 a usage or configuration
//! error; [`Failure`] is decided from the notebook's error kinds in one place.

mod alerts;
mod central;
mod demo;
mod demo_live;
mod entries;
mod export;
mod fit;
mod ingest;
pub(crate) mod lots;
mod report;
mod service;
mod views;

use std::io::IsTerminal;
use std::path::PathBuf;
use std::process::ExitCode;

use clap::{Args, Parser, Subcommand};

use crate::config::Config;
use crate::notebook::{AlertAct, NotebookError};

/// turnbook: catalyst lots, their cycles, deactivation fits and replacement warnings.
#[derive(Debug, Parser)]
#[command(name = "turnbook", version, about)]
pub struct Cli {
    /// Configuration file; without it, TURNBOOK_CONFIG, then ./turnbook.toml, then
    /// /etc/turnbook/turnbook.toml (the first that exists).
    #[arg(long, global = true, env = "TURNBOOK_CONFIG", value_name = "FILE")]
    pub config: Option<PathBuf>,
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
    Demo(DemoArgs),
    /// Ingest export files or folders (a backfill); each content is stored once.
    Ingest(IngestArgs),
    /// List the catalyst lots with their cycle count, latest activity and flags.
    Lots(LotsArgs),
    /// Show one lot's cycles: values, TON, TOF, activity, flags, source files.
    Cycles(CyclesArgs),
    /// Register a catalyst lot, or change its registration (an event in the log).
    Register(RegisterArgs),
    /// Correct one value of a batch; the earlier value stays in the history.
    Correct(CorrectArgs),
    /// Exclude a cycle from fits (its values stay), with the reason.
    Exclude(ExcludeArgs),
    /// Add a note to a lot or a batch.
    Note(NoteArgs),
    /// Sign off a lot's history as it stands now (reviewed, approved or rejected) as a named
    /// signer of the roster; approving needs an earlier review by another signer.
    Signoff(SignoffArgs),
    /// Show every event that concerns a lot, oldest first.
    History(HistoryArgs),
    /// What the database holds: files, duplicates, quarantine, conflicts, lots needing attention.
    Status(StatusArgs),
    /// Fit deactivation models to a lot (or to any two-column CSV series) and forecast
    /// when it crosses the replacement criterion.
    Fit(FitArgs),
    /// Write a lot's report (self-contained HTML with charts, and CSV), or the site summary.
    Report(ReportArgs),
    /// The service: watch the configured export folders, ingest every file once, send alerts.
    Watch,
    /// Deliver the messages waiting in the outbox now (the service does this on its own).
    Mail,
    /// Queue the managers' digest now: every lot's state and forecast, changes, open alerts.
    Digest,
    /// Walk the audit chain and compare every record with the events that wrote it.
    Verify(VerifyArgs),
    /// List alerts with their state, severity and since when (open and acknowledged ones;
    /// `--all` adds cleared and closed).
    Alerts(AlertsArgs),
    /// Acknowledge an alert: someone is on it (recorded with who, when and why).
    Ack(AlertActArgs),
    /// Close an alert's current episode: it is dealt with (recorded with who, when, why).
    Close(AlertActArgs),
    /// Export every cycle of the site, of one site or of one lot with its computed figures,
    /// as CSV or JSON Lines (the column names of `cycles` and `report --csv`).
    Export(ExportArgs),
    /// Print a shell completion script (bash, zsh, fish, elvish, powershell) to stdout.
    Completions(CompletionsArgs),
    /// Print the manual page (roff) to stdout: `turnbook manpage | man -l -`.
    Manpage,
    /// Copy the events the central store lacks to it now (the service does this on its own).
    Ship(ShipArgs),
    /// The company's central store: verify every site's chain, list the lots of all sites.
    #[command(subcommand)]
    Central(CentralCommand),
}

#[derive(Debug, Args)]
pub struct ExportArgs {
    /// Only this lot (default: every lot).
    #[arg(long, conflicts_with = "site")]
    pub lot: Option<String>,
    /// Only the lots registered to this site (as `register --site` named it).
    #[arg(long)]
    pub site: Option<String>,
    /// csv (RFC 4180, formula-like text neutralised) or jsonl (one JSON object a line).
    #[arg(long, value_parser = ["csv", "jsonl"], default_value = "csv")]
    pub format: String,
    /// Write here instead of stdout.
    #[arg(long, value_name = "FILE")]
    pub out: Option<PathBuf>,
}

#[derive(Debug, Args)]
pub struct CompletionsArgs {
    /// The shell to complete for.
    pub shell: clap_complete::Shell,
}

#[derive(Debug, Args)]
pub struct ShipArgs {
    /// Print JSON instead of lines of text.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Subcommand)]
pub enum CentralCommand {
    /// Recompute every site's chain in the central store; name each first broken link.
    Verify(ShipArgs),
    /// List the company's lots by site, with their cycles and latest sign-off.
    Lots(ShipArgs),
}

#[derive(Debug, Args)]
pub struct AlertsArgs {
    /// Also cleared and closed alerts.
    #[arg(long)]
    pub all: bool,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct AlertActArgs {
    /// The alert's id (or key) as `turnbook alerts` lists it.
    pub alert: String,
    /// Why (recorded in the audit trail).
    #[arg(long)]
    pub reason: String,
}

#[derive(Debug, Args)]
pub struct DemoArgs {
    /// The folder to write the plant into (new or empty).
    #[arg(long, value_name = "DIR")]
    pub dir: PathBuf,
    /// Skip the live part (the simulated plant writing files while the service runs).
    #[arg(long)]
    pub no_live: bool,
}

#[derive(Debug, Args)]
pub struct IngestArgs {
    /// Export files or folders to read (folders: every entry below them).
    #[arg(required = true, value_name = "PATH")]
    pub paths: Vec<PathBuf>,
    /// Read every file with this export profile, wherever it lies.
    #[arg(long)]
    pub profile: Option<String>,
    /// Print one JSON object per file instead of a summary.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct LotsArgs {
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct CyclesArgs {
    /// The lot.
    pub lot: String,
    /// table (readable), csv (the export's columns) or json (with the definitions).
    #[arg(long, value_parser = ["table", "csv", "json"], default_value = "table")]
    pub format: String,
}

#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct RegisterArgs {
    /// The lot's name (its id in exports).
    pub lot: String,
    /// What the catalyst is, e.g. "5 % Pd/C, 50 % water-wet paste".
    #[arg(long)]
    pub catalyst: String,
    /// Element symbol of the active metal, e.g. Pd.
    #[arg(long)]
    pub metal: String,
    /// Metal loading, wt %.
    #[arg(long)]
    pub loading: f64,
    /// Catalyst mass charged at the first cycle, g.
    #[arg(long)]
    pub mass: f64,
    /// Date received, YYYY-MM-DD.
    #[arg(long)]
    pub received: Option<String>,
    /// The supplier's own lot number.
    #[arg(long)]
    pub supplier_lot: Option<String>,
    /// Lot cost net of the refining credit.
    #[arg(long)]
    pub cost: Option<f64>,
    /// The site (plant) the lot belongs to, as `[[sites]]` names it.
    #[arg(long)]
    pub site: Option<String>,
    /// Water content of the catalyst as charged, wt % (0 to below 100), for a catalyst
    /// charged water-wet: metal is computed on the dry mass.
    #[arg(long)]
    pub water_content: Option<f64>,
    /// The lot's family: lots of one family share a prior for young lots' forecasts
    /// (without it, lots of the same catalyst description do).
    #[arg(long)]
    pub family: Option<String>,
    /// Why (required when changing an existing lot).
    #[arg(long)]
    pub reason: Option<String>,
}

#[derive(Debug, Args)]
pub struct CorrectArgs {
    /// The batch (cycle) whose value is corrected.
    pub batch: String,
    /// The field, e.g. conversion, temperature, cycle_no.
    pub field: String,
    /// The value with its unit, e.g. "60 °C" or "85 %"; a bare number is in the unit
    /// `cycles` shows (h, °C, mol, g, fraction, µg/g).
    #[arg(allow_hyphen_values = true)]
    pub value: String,
    /// Why (recorded in the audit trail).
    #[arg(long)]
    pub reason: String,
}

#[derive(Debug, Args)]
pub struct ExcludeArgs {
    /// The batch (cycle) to exclude.
    pub batch: String,
    /// Why (recorded in the audit trail).
    #[arg(long)]
    pub reason: String,
    /// Take a previously excluded cycle back into the fits.
    #[arg(long)]
    pub undo: bool,
}

#[derive(Debug, Args)]
pub struct NoteArgs {
    /// The lot the note is about.
    #[arg(long, required_unless_present = "batch")]
    pub lot: Option<String>,
    /// The batch the note is about.
    #[arg(long)]
    pub batch: Option<String>,
    /// The note.
    pub text: String,
}

#[derive(Debug, Args)]
pub struct SignoffArgs {
    /// The lot whose history is signed.
    pub lot: String,
    /// What the signature means.
    #[arg(long, value_parser = ["reviewed", "approved", "rejected"])]
    pub meaning: String,
    /// A comment recorded with the sign-off.
    #[arg(long)]
    pub comment: Option<String>,
    /// Your name as the configuration's signer roster (`[[signers]]`) spells it; your
    /// operating-system account is recorded beside it.
    #[arg(long = "as", value_name = "NAME")]
    pub signer: String,
}

#[derive(Debug, Args)]
pub struct HistoryArgs {
    /// The lot.
    pub lot: String,
    /// Print JSON instead of a table.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct StatusArgs {
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
#[command(allow_negative_numbers = true)]
pub struct FitArgs {
    /// The lot to fit (omit with --series).
    #[arg(required_unless_present = "series", conflicts_with = "series")]
    pub lot: Option<String>,
    /// A CSV file with a header row, x in the first column and y in the second.
    #[arg(long)]
    pub series: Option<PathBuf>,
    /// Model id (linear, first-order, first-order-residual, second-order, power,
    /// power-residual, two-site, plateau) or auto (choice by AICc).
    #[arg(long, default_value = "auto", requires = "series")]
    pub model: String,
    /// Start value of a parameter, NAME=VALUE (repeatable).
    #[arg(long = "start", requires = "series")]
    pub starts: Vec<String>,
    /// The y value to forecast the crossing of.
    #[arg(long, requires = "series")]
    pub threshold: Option<f64>,
    /// Confidence of the forecast interval.
    #[arg(long, default_value_t = 0.90, requires = "series")]
    pub confidence: f64,
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
}

#[derive(Debug, Args)]
pub struct ReportArgs {
    /// The lot (omit with --site).
    #[arg(required_unless_present = "site", conflicts_with = "site")]
    pub lot: Option<String>,
    /// The summary of every lot instead of one lot's report.
    #[arg(long)]
    pub site: bool,
    /// The HTML file to write.
    #[arg(long)]
    pub out: PathBuf,
    /// Also write the cycle table as CSV here (with --site: every lot's cycles).
    #[arg(long)]
    pub csv: Option<PathBuf>,
    /// Show the lot as it stood after this event number (see `history`).
    #[arg(long, conflicts_with = "site")]
    pub as_of: Option<i64>,
}

#[derive(Debug, Args)]
pub struct VerifyArgs {
    /// Print JSON instead of text.
    #[arg(long)]
    pub json: bool,
    /// A head of the chain published earlier, SEQ:HASH (repeatable): the chain must still
    /// hold that event with that hash.
    #[arg(long = "head")]
    pub heads: Vec<crate::model::chain::Head>,
    /// Check only what came after the last recorded intact verification: the links from
    /// its head to the newest event and the rows those events wrote (a full verification
    /// when none is recorded).
    #[arg(long)]
    pub since_last: bool,
}

/// Set up tracing: readable lines on a terminal, JSON lines when asked. RUST_LOG filters.
///
/// The service logs each file at info level; one-shot commands only warn, since they print
/// their own summary. The mail library's own events below warn are dropped whatever
/// RUST_LOG says: at debug it writes every protocol line, credentials included.
pub fn init_logging(json: bool, service: bool) {
    use tracing_subscriber::Layer;
    use tracing_subscriber::layer::SubscriberExt;
    use tracing_subscriber::util::SubscriberInitExt;
    let default = if service {
        "warn,turnbook=info"
    } else {
        "warn,turnbook=warn"
    };
    let env = tracing_subscriber::EnvFilter::try_from_default_env()
        .unwrap_or_else(|_| tracing_subscriber::EnvFilter::new(default));
    let no_mail_protocol = tracing_subscriber::filter::Targets::new()
        .with_default(tracing::Level::TRACE)
        .with_target("lettre", tracing::Level::WARN);
    // Under systemd, each line carries its journald priority; readable lines then need no
    // timestamp of their own either (the journal stamps them), but keep it for copies.
    let writer = crate::logs::StderrWriter {
        prefix: crate::logs::stderr_is_journal(),
    };
    let layer = tracing_subscriber::fmt::layer().with_writer(writer);
    let layer = if json {
        layer.json().boxed()
    } else {
        layer
            .with_ansi(crate::logs::colour_wanted(std::io::stderr().is_terminal()))
            .boxed()
    };
    // The web view's "problems by kind" count what this log shows at warn and error.
    let layer = layer.and_then(crate::web::ProblemTally);
    let filter = tracing_subscriber::filter::FilterExt::and(env, no_mail_protocol);
    tracing_subscriber::registry()
        .with(layer.with_filter(filter))
        .init();
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

/// The exit status of each kind of error, decided here and nowhere else.
impl From<NotebookError> for Failure {
    fn from(e: NotebookError) -> Self {
        match e {
            NotebookError::Usage(_) | NotebookError::Config(_) => Failure::usage(e.to_string()),
            e => Failure::rejected(e.to_string()),
        }
    }
}

impl From<crate::store::StoreError> for Failure {
    fn from(e: crate::store::StoreError) -> Self {
        NotebookError::from(e).into()
    }
}

impl From<std::io::Error> for Failure {
    fn from(e: std::io::Error) -> Self {
        NotebookError::from(e).into()
    }
}

impl From<serde_json::Error> for Failure {
    fn from(e: serde_json::Error) -> Self {
        Failure::rejected(format!("cannot write JSON: {e}"))
    }
}

/// What a verb returns: its exit status, or the failure that ended it.
pub type CmdResult = Result<u8, Failure>;

/// Run a parsed command line.
pub fn run(cli: Cli) -> ExitCode {
    match dispatch(&cli).map_err(|f| with_suggestion(&cli, f)) {
        Ok(code) => ExitCode::from(code),
        Err(f) => {
            eprintln!("turnbook: {}", f.message);
            ExitCode::from(f.code)
        }
    }
}

/// The lot or batch a command names, if any.
fn named(cmd: &Command) -> Option<(crate::notebook::NameKind, &str)> {
    use crate::notebook::NameKind::{Batch, Lot};
    match cmd {
        Command::Cycles(a) => Some((Lot, a.lot.as_str())),
        Command::History(a) => Some((Lot, a.lot.as_str())),
        Command::Signoff(a) => Some((Lot, a.lot.as_str())),
        Command::Fit(a) => a.lot.as_deref().map(|l| (Lot, l)),
        Command::Report(a) => a.lot.as_deref().map(|l| (Lot, l)),
        Command::Export(a) => a.lot.as_deref().map(|l| (Lot, l)),
        Command::Correct(a) => Some((Batch, a.batch.as_str())),
        Command::Exclude(a) => Some((Batch, a.batch.as_str())),
        Command::Note(a) => match (&a.lot, &a.batch) {
            (Some(l), _) => Some((Lot, l.as_str())),
            (None, Some(b)) => Some((Batch, b.as_str())),
            _ => None,
        },
        _ => None,
    }
}

/// A refusal that quotes an unknown lot or batch name gets "did you mean" the closest
/// known one.
fn with_suggestion(cli: &Cli, mut f: Failure) -> Failure {
    let Some((kind, name)) = named(&cli.command) else {
        return f;
    };
    if f.code != 1 || !f.message.contains(&format!("'{name}'")) {
        return f;
    }
    let Ok(cfg) = load(cli) else { return f };
    if let Ok(Some(known)) = crate::notebook::suggest_name(&cfg, kind, name) {
        f.message.push_str(&format!("; did you mean '{known}'?"));
    }
    f
}

fn load(cli: &Cli) -> Result<Config, Failure> {
    let path = crate::config::locate(cli.config.as_deref()).map_err(NotebookError::from)?;
    Ok(Config::load(&path).map_err(NotebookError::from)?)
}

fn dispatch(cli: &Cli) -> CmdResult {
    match &cli.command {
        Command::Demo(a) => demo::run(&a.dir, !a.no_live),
        Command::Ingest(a) => ingest::ingest(load(cli)?, a),
        Command::Lots(a) => lots::lots(&load(cli)?, a.json),
        Command::Cycles(a) => lots::cycles(&load(cli)?, &a.lot, &a.format),
        Command::Register(a) => entries::register(&load(cli)?, a),
        Command::Correct(a) => entries::correct(&load(cli)?, a),
        Command::Exclude(a) => entries::exclude(&load(cli)?, a),
        Command::Note(a) => entries::note(&load(cli)?, a),
        Command::Signoff(a) => entries::sign_off(&load(cli)?, a),
        Command::History(a) => views::history(&load(cli)?, &a.lot, a.json),
        Command::Status(a) => views::status(&load(cli)?, a.json),
        Command::Verify(a) => ingest::verify(&load(cli)?, a),
        Command::Watch => service::watch(&load(cli)?),
        Command::Mail => service::mail(&load(cli)?),
        Command::Digest => service::digest(&load(cli)?),
        Command::Report(a) => report::report(&load(cli)?, a),
        Command::Fit(a) => fit::fit(cli, a),
        Command::Alerts(a) => alerts::list(&load(cli)?, a),
        Command::Ack(a) => alerts::act(&load(cli)?, a, AlertAct::Acknowledge),
        Command::Close(a) => alerts::act(&load(cli)?, a, AlertAct::Close),
        Command::Export(a) => export::export(&load(cli)?, a),
        Command::Completions(a) => export::completions(a.shell),
        Command::Manpage => export::manpage(),
        Command::Ship(a) => central::ship(&load(cli)?, a.json),
        Command::Central(CentralCommand::Verify(a)) => central::verify(&load(cli)?, a.json),
        Command::Central(CentralCommand::Lots(a)) => central::lots(&load(cli)?, a.json),
    }
}

impl Command {
    /// Long-running commands log every unit of work at info level.
    pub fn is_service(&self) -> bool {
        matches!(self, Command::Watch)
    }
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

/// The version of the shape of the JSON the commands print (`lots`, `cycles`, `history`,
/// `status`, `alerts`, `fit`, `verify`); every printed object carries it as `schema`. Raised when a field is renamed,
/// retyped or removed; new fields do not raise it.
pub const JSON_SCHEMA: u32 = crate::notebook::JSON_SCHEMA;

/// Print `value` as pretty JSON with `schema` added to the object, or to each object of
/// an array.
pub fn print_json(value: &impl serde::Serialize) -> CmdResult {
    let v = crate::notebook::with_schema(value)?;
    println!("{}", serde_json::to_string_pretty(&v)?);
    Ok(0)
}

/// A number with `digits` decimals, or "-" when there is none.
pub fn fmt_opt(v: Option<f64>, digits: usize) -> String {
    crate::model::numbers::fixed_or(v, digits, "-")
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
