//! The mailer: works off the outbox by SMTP or by writing `.eml` files, recording each
//! server reply and backing off while the server is unreachable.
//!
//! Delivery is at least once. If the process dies after the server accepted a message but
//! before the row was marked delivered, the message is sent again on restart; it carries
//! the same Message-ID, so receivers and mail clients can recognise the duplicate. The
//! file transport names files by outbox id, so a repeat overwrites instead of doubling.

use std::fmt;
use std::net::IpAddr;
use std::path::{Path, PathBuf};
use std::time::{Duration, SystemTime};

use chrono::{DateTime, Utc};
use lettre::transport::smtp::authentication::Credentials;
use lettre::transport::smtp::client::{Tls, TlsParameters};
use lettre::{AsyncSmtpTransport, AsyncTransport, Message, Tokio1Executor};
use serde::Deserialize;

use crate::alert::AlertError;
use crate::store::outbox::{PendingMessage, due_messages, mark_delivered, mark_failed};
use crate::store::{self, Connection, StoreError};

/// Errors of delivering mail.
#[derive(Debug, thiserror::Error)]
pub enum MailError {
    #[error("outbox: {0}")]
    Store(#[from] StoreError),
    #[error(transparent)]
    Message(#[from] AlertError),
    #[error("mail configuration: {0}")]
    Config(String),
    #[error("writing {path}: {source}")]
    Io {
        path: std::path::PathBuf,
        source: std::io::Error,
    },
    #[error("background task failed: {0}")]
    Join(String),
}

/// Environment variable whose URL overrides the configured transport.
pub const SMTP_URL_ENV: &str = "TURNBOOK_SMTP_URL";

/// How messages leave.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum TransportKind {
    /// Write `.eml` files to a folder (for sites that pick mail up from disk, and demos).
    #[default]
    File,
    Smtp,
}

/// Transport security of the SMTP connection.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Deserialize, Default)]
#[serde(rename_all = "lowercase")]
pub enum Security {
    /// Plain connection upgraded with STARTTLS, which is required.
    #[default]
    Starttls,
    /// TLS from the first byte (SMTPS).
    Tls,
    /// No encryption: allowed only to a loopback address.
    Plain,
}

/// The `[mail]` configuration section. It names where the password is, never the
/// password itself, so it can be logged or Debug-printed safely.
#[derive(Debug, Clone, PartialEq, Deserialize)]
#[serde(deny_unknown_fields, default)]
pub struct MailConfig {
    pub transport: TransportKind,
    /// Folder for the file transport.
    pub dir: PathBuf,
    pub host: Option<String>,
    pub port: Option<u16>,
    pub security: Security,
    pub username: Option<String>,
    /// Name of the environment variable holding the password.
    pub password_env: Option<String>,
    /// File holding the password; must not be readable by group or others.
    pub password_file: Option<PathBuf>,
    pub from: String,
    /// Seconds between outbox polls in [`run_mailer`].
    pub poll_seconds: u64,
    /// Most messages handled per [`deliver_due`] call.
    pub batch: usize,
    /// SMTP command timeout in seconds.
    pub timeout_seconds: u64,
}

impl Default for MailConfig {
    fn default() -> Self {
        MailConfig {
            transport: TransportKind::File,
            dir: PathBuf::from("outbox"),
            host: None,
            port: None,
            security: Security::Starttls,
            username: None,
            password_env: None,
            password_file: None,
            from: "turnbook@localhost".into(),
            poll_seconds: 15,
            batch: 50,
            timeout_seconds: 30,
        }
    }
}

/// A password that never shows itself in Debug output or logs.
#[derive(Clone, PartialEq, Eq)]
pub struct Secret(String);

impl Secret {
    fn expose(&self) -> &str {
        &self.0
    }
}

impl fmt::Debug for Secret {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str("Secret(<redacted>)")
    }
}

/// A fully resolved SMTP destination.
#[derive(Debug, Clone, PartialEq)]
pub struct SmtpTarget {
    pub host: String,
    pub port: u16,
    pub security: Security,
    pub username: Option<String>,
    pub password: Option<Secret>,
}

/// Where delivery goes after applying [`SMTP_URL_ENV`] and reading the password.
#[derive(Debug, Clone, PartialEq)]
pub enum Delivery {
    Files { dir: PathBuf },
    Smtp(SmtpTarget),
}

fn cfg_err(s: impl Into<String>) -> MailError {
    MailError::Config(s.into())
}

fn is_loopback(host: &str) -> bool {
    let h = host.trim_start_matches('[').trim_end_matches(']');
    h.eq_ignore_ascii_case("localhost") || h.parse::<IpAddr>().is_ok_and(|ip| ip.is_loopback())
}

fn default_port(sec: Security) -> u16 {
    match sec {
        Security::Starttls => 587,
        Security::Tls => 465,
        Security::Plain => 25,
    }
}

fn percent_decode(s: &str) -> Result<String, MailError> {
    let b = s.as_bytes();
    let mut out = Vec::with_capacity(b.len());
    let mut i = 0;
    while i < b.len() {
        if b[i] == b'%' {
            let hexd = b
                .get(i + 1..i + 3)
                .and_then(|h| std::str::from_utf8(h).ok())
                .and_then(|h| u8::from_str_radix(h, 16).ok())
                .ok_or_else(|| cfg_err(format!("{SMTP_URL_ENV}: bad percent escape")))?;
            out.push(hexd);
            i += 3;
        } else {
            out.push(b[i]);
            i += 1;
        }
    }
    String::from_utf8(out).map_err(|_| cfg_err(format!("{SMTP_URL_ENV}: credentials not UTF-8")))
}

/// Parse `smtp://` (plain, loopback only), `smtp+starttls://` or `smtps://` URLs with an
/// optional `user[:password]@` and `:port`. Errors never quote the URL, which may hold
/// a password.
pub fn parse_smtp_url(url: &str) -> Result<SmtpTarget, MailError> {
    let (scheme, rest) = url
        .split_once("://")
        .ok_or_else(|| cfg_err(format!("{SMTP_URL_ENV}: expected scheme://host[:port]")))?;
    let security = match scheme.to_ascii_lowercase().as_str() {
        "smtp" => Security::Plain,
        "smtp+starttls" => Security::Starttls,
        "smtps" => Security::Tls,
        _ => {
            return Err(cfg_err(format!(
                "{SMTP_URL_ENV}: scheme must be smtp, smtp+starttls or smtps"
            )));
        }
    };
    let rest = rest.trim_end_matches('/');
    let (userinfo, hostport) = match rest.rsplit_once('@') {
        Some((u, h)) => (Some(u), h),
        None => (None, rest),
    };
    let (username, password) = match userinfo {
        None => (None, None),
        Some(u) => match u.split_once(':') {
            Some((n, p)) => (Some(percent_decode(n)?), Some(Secret(percent_decode(p)?))),
            None => (Some(percent_decode(u)?), None),
        },
    };
    let (host, port) = if let Some(h) = hostport.strip_prefix('[') {
        let (inner, after) = h
            .split_once(']')
            .ok_or_else(|| cfg_err(format!("{SMTP_URL_ENV}: unclosed [ in host")))?;
        (inner.to_string(), after.strip_prefix(':'))
    } else {
        match hostport.rsplit_once(':') {
            Some((h, p)) => (h.to_string(), Some(p)),
            None => (hostport.to_string(), None),
        }
    };
    if host.is_empty() || host.contains('/') {
        return Err(cfg_err(format!("{SMTP_URL_ENV}: missing or invalid host")));
    }
    let port = match port {
        Some(p) => p
            .parse::<u16>()
            .map_err(|_| cfg_err(format!("{SMTP_URL_ENV}: port must be 1-65535")))?,
        None => default_port(security),
    };
    Ok(SmtpTarget {
        host,
        port,
        security,
        username: username.filter(|u| !u.is_empty()),
        password,
    })
}

/// Read the password from systemd's credential `smtp-password`
/// (`$CREDENTIALS_DIRECTORY/smtp-password`, `LoadCredential=` in the unit) when it exists,
/// else from the configured environment variable or file.
fn configured_password(cfg: &MailConfig) -> Result<Option<Secret>, MailError> {
    if let Some(dir) = std::env::var_os("CREDENTIALS_DIRECTORY") {
        let path = std::path::Path::new(&dir).join("smtp-password");
        if path.is_file() {
            return password_file(&path).map(Some);
        }
    }
    if let Some(var) = &cfg.password_env {
        let v = std::env::var(var)
            .map_err(|_| cfg_err(format!("password variable {var} is not set")))?;
        return Ok(Some(Secret(v)));
    }
    match &cfg.password_file {
        Some(path) => password_file(path).map(Some),
        None => Ok(None),
    }
}

/// The password in `path`, a file that group and others cannot read.
fn password_file(path: &Path) -> Result<Secret, MailError> {
    let io = |e| MailError::Io {
        path: path.to_path_buf(),
        source: e,
    };
    let meta = std::fs::metadata(path).map_err(io)?;
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let mode = meta.permissions().mode() & 0o777;
        if mode & 0o077 != 0 {
            return Err(cfg_err(format!(
                "password file {} has mode {mode:o}: readable by group or others; \
                 restrict it with chmod 600",
                path.display()
            )));
        }
    }
    #[cfg(not(unix))]
    let _ = meta;
    let text = std::fs::read_to_string(path).map_err(io)?;
    Ok(Secret(text.trim_end_matches(['\r', '\n']).to_string()))
}

/// Resolve the delivery target: `env_url` (the value of [`SMTP_URL_ENV`]) wins over the
/// configured transport; plain SMTP is refused unless the host is a loopback address.
pub fn resolve_delivery(cfg: &MailConfig, env_url: Option<&str>) -> Result<Delivery, MailError> {
    let mut target = match env_url.filter(|u| !u.trim().is_empty()) {
        Some(url) => parse_smtp_url(url.trim())?,
        None => match cfg.transport {
            TransportKind::File => {
                return Ok(Delivery::Files {
                    dir: cfg.dir.clone(),
                });
            }
            TransportKind::Smtp => {
                let host = cfg
                    .host
                    .clone()
                    .filter(|h| !h.trim().is_empty())
                    .ok_or_else(|| cfg_err("[mail] transport = \"smtp\" needs host"))?;
                SmtpTarget {
                    port: cfg.port.unwrap_or(default_port(cfg.security)),
                    host,
                    security: cfg.security,
                    username: cfg.username.clone(),
                    password: None,
                }
            }
        },
    };
    if target.security == Security::Plain && !is_loopback(&target.host) {
        return Err(cfg_err(format!(
            "plain SMTP is only allowed to a loopback address, not {}",
            target.host
        )));
    }
    if target.username.is_none() {
        target.username = cfg.username.clone();
    }
    if target.password.is_none() {
        target.password = configured_password(cfg)?;
    }
    match (&target.username, &target.password) {
        (Some(_), None) => Err(cfg_err("SMTP username given without a password source")),
        (None, Some(_)) => Err(cfg_err("SMTP password given without a username")),
        _ => Ok(Delivery::Smtp(target)),
    }
}

/// What one [`deliver_due`] pass did.
#[derive(Debug, Clone, Default, PartialEq, Eq)]
pub struct DeliveryReport {
    pub attempted: usize,
    pub delivered: usize,
    pub failed: usize,
}

fn build_smtp(
    t: &SmtpTarget,
    timeout: Duration,
) -> Result<AsyncSmtpTransport<Tokio1Executor>, MailError> {
    let tls = |host: &str| {
        TlsParameters::new(host.to_string()).map_err(|e| cfg_err(format!("TLS setup: {e}")))
    };
    let tls = match t.security {
        Security::Plain => Tls::None,
        Security::Starttls => Tls::Required(tls(&t.host)?),
        Security::Tls => Tls::Wrapper(tls(&t.host)?),
    };
    let mut b = AsyncSmtpTransport::<Tokio1Executor>::builder_dangerous(t.host.clone())
        .port(t.port)
        .tls(tls)
        .timeout(Some(timeout));
    if let (Some(u), Some(p)) = (&t.username, &t.password) {
        b = b.credentials(Credentials::new(u.clone(), p.expose().to_string()));
    }
    Ok(b.build())
}

/// A readable, filesystem-safe file name for a message.
fn eml_name(p: &PendingMessage) -> String {
    let safe: String = p
        .lot
        .chars()
        .map(|c| {
            if c.is_ascii_alphanumeric() || c == '-' || c == '_' {
                c
            } else {
                '_'
            }
        })
        .take(60)
        .collect();
    format!(
        "{}-{}-{}-{}.eml",
        p.queued_at.format("%Y%m%dT%H%M%SZ"),
        p.rule,
        if safe.is_empty() { "all".into() } else { safe },
        p.id
    )
}

/// Write atomically (temporary file, then rename) so a reader never sees half a message.
fn write_eml(dir: &Path, name: &str, bytes: &[u8]) -> Result<PathBuf, MailError> {
    let io = |path: &Path| {
        let path = path.to_path_buf();
        move |e| MailError::Io { path, source: e }
    };
    crate::modes::create_dirs(dir).map_err(io(dir))?;
    let tmp = dir.join(format!(".{name}.tmp"));
    let dst = dir.join(name);
    crate::modes::write_file(&tmp, bytes).map_err(io(&tmp))?;
    std::fs::rename(&tmp, &dst).map_err(io(&dst))?;
    Ok(dst)
}

/// Run a database step on the blocking pool with its own connection.
async fn with_db<T, F>(path: &Path, f: F) -> Result<T, MailError>
where
    T: Send + 'static,
    F: FnOnce(&Connection) -> Result<T, StoreError> + Send + 'static,
{
    let path = path.to_path_buf();
    tokio::task::spawn_blocking(move || {
        let conn = store::connect(&path)?;
        Ok(f(&conn)?)
    })
    .await
    .map_err(|e| MailError::Join(e.to_string()))?
}

enum Outcome {
    Sent(String),
    Failed(String),
    /// The server could not be reached: the rest of the batch would fail the same way.
    Unreachable(String),
}

async fn send_one(
    delivery: &Delivery,
    smtp: Option<&AsyncSmtpTransport<Tokio1Executor>>,
    p: &PendingMessage,
    msg: Message,
) -> Outcome {
    match (delivery, smtp) {
        (Delivery::Files { dir }, _) => {
            let name = eml_name(p);
            let bytes = msg.formatted();
            let dir = dir.clone();
            match tokio::task::spawn_blocking(move || write_eml(&dir, &name, &bytes)).await {
                Ok(Ok(path)) => Outcome::Sent(format!("written {}", path.display())),
                Ok(Err(e)) => Outcome::Failed(e.to_string()),
                Err(e) => Outcome::Failed(e.to_string()),
            }
        }
        (Delivery::Smtp(_), Some(t)) => match t.send(msg).await {
            Ok(resp) => {
                let lines: Vec<&str> = resp.message().collect();
                Outcome::Sent(format!("{} {}", resp.code(), lines.join(" ")))
            }
            Err(e) if e.is_permanent() || e.is_transient() => Outcome::Failed(e.to_string()),
            Err(e) => Outcome::Unreachable(e.to_string()),
        },
        (Delivery::Smtp(_), None) => Outcome::Failed("SMTP transport missing".into()),
    }
}

/// Send every message due at `now` (at most `cfg.batch`), recording replies and failures.
pub async fn deliver_due(
    conn_path: &Path,
    cfg: &MailConfig,
    now: DateTime<Utc>,
) -> Result<DeliveryReport, MailError> {
    deliver_waiting(conn_path, cfg, now, now).await
}

/// Attempt every message still waiting, whatever its backoff (`turnbook mail`: someone
/// asks for delivery now, typically right after the mail server came back).
pub async fn deliver_all_waiting(
    conn_path: &Path,
    cfg: &MailConfig,
    now: DateTime<Utc>,
) -> Result<DeliveryReport, MailError> {
    // Any backoff ends long before a thousand years (stored timestamps compare as text,
    // so a four-digit year is kept).
    let any_time = now + chrono::TimeDelta::days(365_000);
    deliver_waiting(conn_path, cfg, now, any_time).await
}

/// Attempt the messages whose next attempt falls at or before `due_by`, at time `now`.
async fn deliver_waiting(
    conn_path: &Path,
    cfg: &MailConfig,
    now: DateTime<Utc>,
    due_by: DateTime<Utc>,
) -> Result<DeliveryReport, MailError> {
    let env_url = std::env::var(SMTP_URL_ENV).ok();
    let delivery = resolve_delivery(cfg, env_url.as_deref())?;
    let batch = cfg.batch.max(1);
    let due = with_db(conn_path, move |c| due_messages(c, due_by, batch)).await?;
    let mut report = DeliveryReport::default();
    if due.is_empty() {
        return Ok(report);
    }
    let smtp = match &delivery {
        Delivery::Smtp(t) => {
            tracing::debug!(host = %t.host, port = t.port, security = ?t.security, "connecting");
            Some(build_smtp(
                t,
                Duration::from_secs(cfg.timeout_seconds.max(1)),
            )?)
        }
        Delivery::Files { .. } => None,
    };
    let mut unreachable: Option<String> = None;
    for p in due {
        report.attempted += 1;
        let outcome = if let Some(err) = &unreachable {
            Outcome::Failed(err.clone())
        } else {
            match p
                .message
                .to_message(&cfg.from, SystemTime::from(p.queued_at))
            {
                Ok(msg) => send_one(&delivery, smtp.as_ref(), &p, msg).await,
                Err(e) => Outcome::Failed(e.to_string()),
            }
        };
        let (id, attempts) = (p.id, p.attempts);
        if let Outcome::Unreachable(err) = &outcome {
            unreachable = Some(err.clone());
        }
        match outcome {
            Outcome::Sent(reply) => {
                tracing::info!(id, message_id = %p.message.message_id, %reply, "alert delivered");
                with_db(conn_path, move |c| mark_delivered(c, id, now, &reply)).await?;
                report.delivered += 1;
            }
            Outcome::Failed(err) | Outcome::Unreachable(err) => {
                let e2 = err.clone();
                let next =
                    with_db(conn_path, move |c| mark_failed(c, id, attempts, now, &e2)).await?;
                tracing::warn!(id, error = %err, next_attempt = %next, "alert delivery failed");
                report.failed += 1;
            }
        }
    }
    Ok(report)
}

/// Deliver due messages every `cfg.poll_seconds` until `shutdown` turns true (or its
/// sender is dropped). A failing pass is logged and retried on the next tick.
pub async fn run_mailer(
    db_path: &Path,
    cfg: &MailConfig,
    mut shutdown: tokio::sync::watch::Receiver<bool>,
) -> Result<(), MailError> {
    // Validate once up front so a bad configuration stops the service clearly.
    resolve_delivery(cfg, std::env::var(SMTP_URL_ENV).ok().as_deref())?;
    let poll = Duration::from_secs(cfg.poll_seconds.max(1));
    loop {
        if *shutdown.borrow() {
            break;
        }
        match deliver_due(db_path, cfg, Utc::now()).await {
            Ok(r) if r.attempted > 0 => {
                tracing::info!(
                    attempted = r.attempted,
                    delivered = r.delivered,
                    failed = r.failed,
                    "mailer pass"
                );
            }
            Ok(_) => {}
            Err(e) => tracing::warn!(error = %e, "mailer pass failed"),
        }
        tokio::select! {
            _ = tokio::time::sleep(poll) => {}
            changed = shutdown.changed() => {
                if changed.is_err() {
                    break;
                }
            }
        }
    }
    tracing::info!("mailer stopped");
    Ok(())
}
