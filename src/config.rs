//! The TOML configuration: where the database lives, which folders hold which instrument's
//! exports, how each export is read, and the chemistry, fitting and alert settings.
//!
//! Loading validates everything once, so a running service never meets a bad setting;
//! every error names the key and what was expected.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};

use serde::Deserialize;

use crate::alert::AlertRules;
use crate::chem::{ActivityBasis, DEFAULT_RATIO_TOLERANCE, Route};
use crate::ingest::Profile;
use crate::mail::MailConfig;
use crate::watch::WatchFolder;

/// A configuration problem: which file, which key, what was expected.
#[derive(Debug, thiserror::Error)]
pub enum ConfigError {
    #[error("cannot read configuration {path}: {source}")]
    Read {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("configuration {path} is not valid: {message}")]
    Syntax { path: PathBuf, message: String },
    #[error("configuration {path}, key `{key}`: {message}")]
    Invalid {
        path: PathBuf,
        key: String,
        message: String,
    },
    #[error(
        "no configuration file found; looked in {}; name one with --config FILE or \
         TURNBOOK_CONFIG, make a demonstration plant with `turnbook demo --dir DIR`, or start \
         from the commented example deploy/turnbook.example.toml",
        looked.join(", ")
    )]
    NotFound { looked: Vec<String> },
}

/// The system-wide configuration, looked up last.
pub const SYSTEM_CONFIG: &str = "/etc/turnbook/turnbook.toml";

/// The configuration file to use: `explicit` (from `--config` or `TURNBOOK_CONFIG`) when
/// given, else `./turnbook.toml`, else [`SYSTEM_CONFIG`], the first that exists.
pub fn locate(explicit: Option<&Path>) -> Result<PathBuf, ConfigError> {
    if let Some(p) = explicit {
        return Ok(p.to_path_buf());
    }
    let candidates = [PathBuf::from("turnbook.toml"), PathBuf::from(SYSTEM_CONFIG)];
    if let Some(found) = candidates.iter().find(|p| p.is_file()) {
        return Ok(found.clone());
    }
    Err(ConfigError::NotFound {
        looked: vec![
            "--config (not given)".into(),
            "TURNBOOK_CONFIG (not set)".into(),
            "./turnbook.toml".into(),
            SYSTEM_CONFIG.into(),
        ],
    })
}

/// The whole configuration, as written in `turnbook.toml`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Config {
    /// SQLite database file; relative paths are taken from the configuration's folder.
    #[serde(default = "default_database")]
    pub database: PathBuf,
    /// Where rejected files are copied (they are never deleted from their source).
    #[serde(default = "default_quarantine")]
    pub quarantine: PathBuf,
    /// Name written into events as who acted; the OS user when absent.
    #[serde(default)]
    pub actor: Option<String>,
    /// The audit chain's key file (readable by the service's user only; created at first
    /// start). When absent: `$CREDENTIALS_DIRECTORY/turnbook-chain-key` if that exists,
    /// else `turnbook.key` beside the database.
    #[serde(default)]
    pub chain_key: Option<PathBuf>,
    /// The witness file: the chain's head (`SEQ:HASH`), rewritten after each commit that
    /// appends events. Point it at another disk. Default `turnbook.head` beside the database.
    #[serde(default)]
    pub head_witness: Option<PathBuf>,
    /// Files larger than this are rejected unread.
    #[serde(default = "default_max_file_bytes")]
    pub max_file_bytes: u64,
    /// Files stored per transaction in a backfill (`ingest` of many files).
    #[serde(default = "default_batch_files")]
    pub files_per_transaction: usize,
    #[serde(default)]
    pub sites: Vec<Site>,
    #[serde(default)]
    pub chemistry: Chemistry,
    #[serde(default)]
    pub fitting: Fitting,
    #[serde(default)]
    pub economics: Option<Economics>,
    #[serde(default)]
    pub profiles: BTreeMap<String, Profile>,
    #[serde(default)]
    pub folders: Vec<WatchFolder>,
    #[serde(default)]
    pub alerts: AlertRules,
    #[serde(default)]
    pub mail: MailConfig,
    /// The QA signers' roster: who may sign off (`signoff --as NAME`) and, optionally,
    /// from which operating-system accounts. Empty: sign-offs are refused.
    #[serde(default)]
    pub signers: Vec<crate::model::signoff::Signer>,
    /// The read-only browser view and the operations endpoints of the service; off when
    /// absent.
    #[serde(default)]
    pub web: Option<Web>,
    /// The plant's IANA time zone ("Europe/Berlin"): batch starts without an offset are
    /// read in it and dates shown to people are its local dates. UTC when absent.
    #[serde(default)]
    pub time_zone: Option<String>,
    /// This plant's identity in a company's central store: every new event carries it
    /// inside its hashed payload. Absent: events carry none and nothing is shipped.
    #[serde(default)]
    pub site: Option<SiteIdentity>,
    /// The company's central PostgreSQL store, which the service ships events to and the
    /// site's `verify` compares its head with. Off when absent (and no
    /// TURNBOOK_CENTRAL_URL is set).
    #[serde(default)]
    pub central: Option<Central>,
    /// Folder of the configuration file, for relative paths (set at load).
    #[serde(skip)]
    pub base_dir: PathBuf,
    /// The file it was loaded from (set at load).
    #[serde(skip)]
    pub source: PathBuf,
}

/// A plant site: lots and folders belong to one.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Site {
    pub name: String,
    #[serde(default)]
    pub description: Option<String>,
    /// Currency of lot costs at this site, for display.
    #[serde(default)]
    pub currency: Option<String>,
}

/// `[site]`: which plant this notebook is.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct SiteIdentity {
    /// Short, stable and unique across the company (letters, digits, `-`, `_`, `.`;
    /// at most 40), e.g. "north-3". Lot and batch ids are unique per site only.
    pub id: String,
}

/// `[central]`: the company's PostgreSQL store.
#[derive(Clone, Default, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Central {
    /// `postgresql://user@host:port/dbname` (TURNBOOK_CENTRAL_URL wins when set);
    /// `?sslmode=require` asks for TLS. Keep the password out of it: see `password_file`.
    #[serde(default)]
    pub url: Option<String>,
    /// File holding the database password (TURNBOOK_CENTRAL_PASSWORD wins when set).
    #[serde(default)]
    pub password_file: Option<PathBuf>,
    /// PEM file of the certificate authorities the server's certificate is checked
    /// against (with `sslmode=require`); the public web roots when absent.
    #[serde(default)]
    pub ca_file: Option<PathBuf>,
    /// Events per batch sent to the server.
    #[serde(default = "default_ship_batch")]
    pub batch_events: usize,
    /// Seconds the service waits between looks for new events to ship.
    #[serde(default = "default_ship_interval")]
    pub interval_seconds: u64,
    /// Ship from the service (`watch`); `turnbook ship` works either way.
    #[serde(default = "default_true")]
    pub ship: bool,
    /// Connections a shipping round writes batches over at once (they commit in order).
    #[serde(default = "default_ship_connections")]
    pub connections: usize,
    /// For `turnbook central verify` at the center: each site's chain key file, by site
    /// id, so that its keyed links can be recomputed there.
    #[serde(default)]
    pub site_keys: BTreeMap<String, PathBuf>,
}

/// Not the password, and not the URL, which may hold one.
impl std::fmt::Debug for Central {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Central")
            .field("url", &self.url.as_ref().map(|_| "<set>"))
            .field("password_file", &self.password_file)
            .field("batch_events", &self.batch_events)
            .field("interval_seconds", &self.interval_seconds)
            .field("ship", &self.ship)
            .field("connections", &self.connections)
            .finish_non_exhaustive()
    }
}

fn default_ship_batch() -> usize {
    5000
}
fn default_ship_interval() -> u64 {
    2
}
fn default_ship_connections() -> usize {
    2
}
fn default_true() -> bool {
    true
}

/// How raw measurements become TON, TOF and activity.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Chemistry {
    /// Conversion at or above which a cycle is censored (k_app is only a lower bound).
    #[serde(default = "default_saturation")]
    pub saturation: f64,
    /// Apparent activation energy, kJ/mol, for Arrhenius normalisation; none: no normalisation.
    #[serde(default)]
    pub activation_energy_kj_mol: Option<f64>,
    /// Reference temperature for Arrhenius normalisation, °C.
    #[serde(default = "default_t_ref")]
    pub reference_temperature_c: f64,
    /// Route of administration of the product, for ICH Q3D limits: oral, parenteral, inhalation.
    #[serde(default)]
    pub route: Route,
    /// Metal-in-product limits by element, µg/g, overriding the built-in ICH Q3D values.
    #[serde(default)]
    pub metal_limits_ug_g: BTreeMap<String, f64>,
    /// What activity compares k_app per: "catalyst-ratio" (the default: per mol metal /
    /// mol limiting substrate, scale-free at constant substrate concentration) or
    /// "metal-charged" (per mol of metal charged, which halves when the same recipe runs
    /// at twice the scale).
    #[serde(default)]
    pub activity_basis: ActivityBasis,
    /// A cycle whose catalyst-to-substrate ratio differs from the lot's usual one (median
    /// of its complete cycles) by more than this fraction is flagged `ratio-off-usual`.
    /// Default 0.25, a common practice placeholder.
    #[serde(default = "default_ratio_tolerance")]
    pub ratio_tolerance: f64,
}

/// The y of a lot's fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Measure {
    /// Activity from k_app (the default).
    #[default]
    Activity,
    /// TON per cycle.
    Ton,
}

/// The x of a lot's fit.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Axis {
    /// Cycle number (the default).
    #[default]
    Cycle,
    /// Cumulative hours on stream.
    Hours,
}

impl std::fmt::Display for Measure {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Measure::Activity => "activity",
            Measure::Ton => "ton",
        })
    }
}

impl std::fmt::Display for Axis {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Axis::Cycle => "cycle",
            Axis::Hours => "hours",
        })
    }
}

/// What is fitted per lot and when it must be replaced.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Fitting {
    /// The y of the fit: "activity" (from k_app, the default) or "ton" (TON per cycle).
    #[serde(default)]
    pub measure: Measure,
    /// The x of the fit: "cycle" (cycle number) or "hours" (cumulative time on stream).
    #[serde(default)]
    pub axis: Axis,
    /// Replacement criterion as a fraction of the fitted fresh value (e.g. 0.6).
    #[serde(default)]
    pub criterion_fraction: Option<f64>,
    /// Replacement criterion as an absolute value of the measure.
    #[serde(default)]
    pub criterion_absolute: Option<f64>,
    /// Confidence of forecast intervals.
    #[serde(default = "default_confidence")]
    pub confidence: f64,
    /// Candidate models (ids); empty: every activity model.
    #[serde(default)]
    pub models: Vec<String>,
    /// Page's CUSUM reference value k and decision interval h, in residual standard deviations.
    #[serde(default = "default_cusum_k")]
    pub cusum_k: f64,
    #[serde(default = "default_cusum_h")]
    pub cusum_h: f64,
}

/// Where the service serves its read-only pages, `/healthz` and `/metrics`.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Web {
    /// Address and port, e.g. "127.0.0.1:8470".
    pub listen: String,
    /// File holding the bearer token requests must carry; required when `listen` is not a
    /// loopback address. Relative to the configuration's folder.
    #[serde(default)]
    pub token_file: Option<PathBuf>,
    /// The address people open, when it differs from `listen` (a reverse proxy):
    /// messages link to each lot's page under it. Default `http://LISTEN/`.
    #[serde(default)]
    pub public_url: Option<String>,
}

impl Web {
    /// The page of a lot as people reach it (the lot id percent-encoded).
    pub fn lot_url(&self, lot: &str) -> String {
        let base = self
            .public_url
            .clone()
            .unwrap_or_else(|| format!("http://{}/", self.listen.trim()));
        let mut path = String::new();
        for b in lot.bytes() {
            if b.is_ascii_alphanumeric() || b"-._~".contains(&b) {
                path.push(char::from(b));
            } else {
                path.push_str(&format!("%{b:02X}"));
            }
        }
        format!("{}/lots/{path}", base.trim_end_matches('/'))
    }

    /// The address to listen on (validated at load).
    pub fn address(&self) -> Option<std::net::SocketAddr> {
        self.listen.trim().parse().ok()
    }
}

/// Costs for the economic replacement point.
#[derive(Debug, Clone, Deserialize)]
#[serde(deny_unknown_fields)]
pub struct Economics {
    /// Fixed cost per cycle (labour, filtration, analysis), in the site's currency.
    pub cost_per_cycle: f64,
    /// Lot cost when a lot does not give its own, net of the refining credit.
    #[serde(default)]
    pub default_lot_cost: Option<f64>,
}

fn default_database() -> PathBuf {
    PathBuf::from("turnbook.db")
}
fn default_quarantine() -> PathBuf {
    PathBuf::from("quarantine")
}
fn default_max_file_bytes() -> u64 {
    16 * 1024 * 1024
}
fn default_batch_files() -> usize {
    // Each commit rewrites the pages of the hash index it touched, wherever they lie: at
    // 4,000 files a commit a backfill writes a third less log than at 1,000. Memory is
    // bounded by the readers' parts (`Ingestor::part_bytes`), not by this count.
    4000
}
fn default_saturation() -> f64 {
    0.995
}
fn default_ratio_tolerance() -> f64 {
    DEFAULT_RATIO_TOLERANCE
}
fn default_t_ref() -> f64 {
    60.0
}
fn default_confidence() -> f64 {
    0.90
}
fn default_cusum_k() -> f64 {
    0.5
}
fn default_cusum_h() -> f64 {
    4.5
}

impl Default for Chemistry {
    fn default() -> Self {
        Chemistry {
            saturation: default_saturation(),
            activation_energy_kj_mol: None,
            reference_temperature_c: default_t_ref(),
            route: Route::default(),
            metal_limits_ug_g: BTreeMap::new(),
            activity_basis: ActivityBasis::default(),
            ratio_tolerance: default_ratio_tolerance(),
        }
    }
}

impl Default for Fitting {
    fn default() -> Self {
        Fitting {
            measure: Measure::default(),
            axis: Axis::default(),
            criterion_fraction: None,
            criterion_absolute: None,
            confidence: default_confidence(),
            models: Vec::new(),
            cusum_k: default_cusum_k(),
            cusum_h: default_cusum_h(),
        }
    }
}

impl Config {
    /// Read, parse and validate a configuration file.
    pub fn load(path: &Path) -> Result<Config, ConfigError> {
        let text = std::fs::read_to_string(path).map_err(|source| ConfigError::Read {
            path: path.to_path_buf(),
            source,
        })?;
        let base = path
            .parent()
            .map(Path::to_path_buf)
            .filter(|p| !p.as_os_str().is_empty())
            .unwrap_or_else(|| PathBuf::from("."));
        Config::from_toml(&text, path, &base)
    }

    /// Parse and validate configuration text; `path` names it in errors.
    pub fn from_toml(text: &str, path: &Path, base: &Path) -> Result<Config, ConfigError> {
        let mut cfg: Config = toml::from_str(text).map_err(|e| {
            // Name the line and column; toml's own rendering spans several lines.
            let at = e.span().map(|span| {
                let before = text.get(..span.start).unwrap_or(text);
                let line = before.matches('\n').count() + 1;
                let column = before.rsplit('\n').next().map_or(0, |l| l.chars().count()) + 1;
                // Quote the line, so the key it sets is named even when toml's message
                // (a type mismatch, say) does not name it.
                let quoted: String = text
                    .lines()
                    .nth(line - 1)
                    .unwrap_or("")
                    .trim()
                    .chars()
                    .filter(|c| !c.is_control())
                    .take(80)
                    .collect();
                format!("line {line}, column {column} (`{quoted}`): ")
            });
            ConfigError::Syntax {
                path: path.to_path_buf(),
                message: format!("{}{}", at.unwrap_or_default(), e.message().trim()),
            }
        })?;
        cfg.base_dir = base.to_path_buf();
        cfg.source = path.to_path_buf();
        cfg.validate()?;
        Ok(cfg)
    }

    /// A fingerprint (SHA-256, hex) of every setting a lot's analysis depends on: the
    /// chemistry, fitting and economics sections, the profiles (their assay
    /// uncertainties), the sites (currencies), the lead times and the time zone. A stored
    /// fit carries it, so `verify` recomputes only fits made under today's settings.
    pub fn analysis_fingerprint(&self) -> String {
        use sha2::{Digest, Sha256};
        let text = format!(
            "{:?}|{:?}|{:?}|{:?}|{:?}|{:?}|{:?}|{:?}|{:?}",
            self.chemistry,
            self.fitting,
            self.economics,
            self.profiles,
            self.sites,
            self.alerts.lead_cycles,
            self.alerts.lead_days,
            self.alerts.lead_days_by_catalyst,
            self.time_zone
        );
        hex::encode(Sha256::digest(text.as_bytes()))
    }

    /// The plant's time zone (validated at load; UTC when absent).
    pub fn zone(&self) -> chrono_tz::Tz {
        self.time_zone
            .as_deref()
            .and_then(|z| crate::model::calendar::zone(z).ok())
            .unwrap_or(chrono_tz::UTC)
    }

    fn invalid(&self, key: impl Into<String>, message: impl Into<String>) -> ConfigError {
        ConfigError::Invalid {
            path: self.source.clone(),
            key: key.into(),
            message: message.into(),
        }
    }

    fn validate(&self) -> Result<(), ConfigError> {
        let c = &self.chemistry;
        if !(c.saturation > 0.5 && c.saturation < 1.0) {
            return Err(self.invalid(
                "chemistry.saturation",
                "expected a conversion between 0.5 and 1 (exclusive), e.g. 0.995",
            ));
        }
        if let Some(ea) = c.activation_energy_kj_mol
            && !(ea.is_finite() && ea > 0.0 && ea < 500.0)
        {
            return Err(self.invalid(
                "chemistry.activation_energy_kj_mol",
                "expected kJ/mol between 0 and 500",
            ));
        }
        if !(-100.0..=500.0).contains(&c.reference_temperature_c) {
            return Err(self.invalid(
                "chemistry.reference_temperature_c",
                "expected °C between -100 and 500",
            ));
        }
        if !(c.ratio_tolerance.is_finite() && c.ratio_tolerance > 0.0 && c.ratio_tolerance <= 10.0)
        {
            return Err(self.invalid(
                "chemistry.ratio_tolerance",
                "expected a fraction above 0 and at most 10, e.g. 0.25",
            ));
        }
        for (metal, v) in &c.metal_limits_ug_g {
            if !(v.is_finite() && *v > 0.0) {
                return Err(self.invalid(
                    format!("chemistry.metal_limits_ug_g.{metal}"),
                    "expected a positive number of µg/g",
                ));
            }
        }
        let f = &self.fitting;
        if f.criterion_fraction.is_some() && f.criterion_absolute.is_some() {
            return Err(self.invalid(
                "fitting.criterion_absolute",
                "give either criterion_fraction or criterion_absolute, not both",
            ));
        }
        if let Some(x) = f.criterion_fraction
            && !(x > 0.0 && x < 1.0)
        {
            return Err(self.invalid(
                "fitting.criterion_fraction",
                "expected a fraction between 0 and 1, e.g. 0.6",
            ));
        }
        if !(f.confidence > 0.5 && f.confidence < 1.0) {
            return Err(self.invalid(
                "fitting.confidence",
                "expected a probability between 0.5 and 1, e.g. 0.90",
            ));
        }
        if !(f.cusum_k >= 0.0 && f.cusum_h > 0.0) {
            return Err(self.invalid("fitting.cusum_h", "expected cusum_k >= 0 and cusum_h > 0"));
        }
        if let Some(w) = &self.web
            && w.address().is_none()
        {
            return Err(self.invalid(
                "web.listen",
                format!(
                    "'{}' is not an address and port; expected e.g. \"127.0.0.1:8470\"",
                    w.listen
                ),
            ));
        }
        if let Some(z) = &self.time_zone
            && let Err(e) = crate::model::calendar::zone(z)
        {
            return Err(self.invalid("time_zone", e.to_string()));
        }
        if self.files_per_transaction == 0 {
            return Err(self.invalid("files_per_transaction", "expected at least 1"));
        }
        if let Some(problem) = self.alerts.problems().into_iter().next() {
            return Err(self.invalid("alerts", problem));
        }
        self.validate_signers()?;
        self.validate_central()?;
        for (name, p) in &self.profiles {
            p.validate()
                .map_err(|m| self.invalid(format!("profiles.{name}"), m))?;
        }
        let sites: Vec<&str> = self.sites.iter().map(|s| s.name.as_str()).collect();
        for (i, folder) in self.folders.iter().enumerate() {
            let key = format!("folders[{i}]");
            if let Err(e) = folder.validate(i) {
                let text = e.to_string();
                let prefix = format!("{key}.");
                return Err(
                    self.invalid(key, text.strip_prefix(&prefix).unwrap_or(&text).to_string())
                );
            }
            if !self.profiles.contains_key(&folder.profile) {
                return Err(self.invalid(
                    format!("{key}.profile"),
                    format!(
                        "no profile named '{}'; expected one of: {}",
                        folder.profile,
                        self.profiles.keys().cloned().collect::<Vec<_>>().join(", ")
                    ),
                ));
            }
            if let Some(site) = &folder.site
                && !sites.contains(&site.as_str())
            {
                return Err(self.invalid(
                    format!("{key}.site"),
                    format!("no site named '{site}' in [[sites]]"),
                ));
            }
        }
        Ok(())
    }

    /// A site id fit for a key; a central batch size and interval in range.
    fn validate_central(&self) -> Result<(), ConfigError> {
        if let Some(s) = &self.site
            && (s.id.is_empty()
                || s.id.len() > 40
                || !s
                    .id
                    .chars()
                    .all(|c| c.is_ascii_alphanumeric() || matches!(c, '-' | '_' | '.')))
        {
            return Err(self.invalid(
                "site.id",
                format!(
                    "'{}' is not a site id; expected 1 to 40 letters, digits, '-', '_' or '.', e.g. \"north-3\"",
                    s.id.escape_default()
                ),
            ));
        }
        if let Some(c) = &self.central {
            if !(1..=100_000).contains(&c.batch_events) {
                return Err(self.invalid("central.batch_events", "expected 1 to 100000"));
            }
            if !(1..=3600).contains(&c.interval_seconds) {
                return Err(self.invalid("central.interval_seconds", "expected 1 to 3600"));
            }
            if !(1..=8).contains(&c.connections) {
                return Err(self.invalid("central.connections", "expected 1 to 8"));
            }
        }
        Ok(())
    }

    /// The site id events are stamped with, if configured.
    pub fn site_id(&self) -> Option<&str> {
        self.site.as_ref().map(|s| s.id.as_str())
    }

    /// Each signer has a printable name of its own and accounts without spaces.
    fn validate_signers(&self) -> Result<(), ConfigError> {
        for (i, s) in self.signers.iter().enumerate() {
            let key = format!("signers[{i}].name");
            let name = s.name.trim();
            if name.is_empty() || name.chars().count() > 80 || name.chars().any(char::is_control) {
                return Err(self.invalid(
                    key,
                    "expected a name of 1 to 80 printable characters, e.g. \"M. Ferreira\"",
                ));
            }
            if let Some(j) = self.signers[..i]
                .iter()
                .position(|o| crate::model::signoff::same_name(&o.name, name))
            {
                return Err(self.invalid(
                    key,
                    format!("'{name}' is already signers[{j}]; expected each signer once"),
                ));
            }
            if let Some(a) = s
                .accounts
                .iter()
                .find(|a| a.is_empty() || a.chars().any(|c| c.is_whitespace() || c.is_control()))
            {
                return Err(self.invalid(
                    format!("signers[{i}].accounts"),
                    format!("'{}' is not an account name; expected login names without spaces, e.g. [\"mferreira\"]", a.escape_default()),
                ));
            }
        }
        Ok(())
    }

    /// A path from the configuration, made absolute against the configuration's folder.
    pub fn resolve(&self, p: &Path) -> PathBuf {
        if p.is_absolute() {
            p.to_path_buf()
        } else {
            self.base_dir.join(p)
        }
    }

    /// A file beside the database.
    fn beside_database(&self, name: &str) -> PathBuf {
        let db = self.database_path();
        db.parent()
            .map_or_else(|| PathBuf::from(name), |d| d.join(name))
    }

    /// Where the chain key is (see [`Config::chain_key`]).
    pub fn chain_key_path(&self) -> PathBuf {
        if let Some(p) = &self.chain_key {
            return self.resolve(p);
        }
        if let Some(dir) = std::env::var_os("CREDENTIALS_DIRECTORY") {
            let p = PathBuf::from(dir).join("turnbook-chain-key");
            if p.exists() {
                return p;
            }
        }
        self.beside_database("turnbook.key")
    }

    /// Where the chain's head is published (see [`Config::head_witness`]).
    pub fn head_witness_path(&self) -> PathBuf {
        match &self.head_witness {
            Some(p) => self.resolve(p),
            None => self.beside_database("turnbook.head"),
        }
    }

    pub fn database_path(&self) -> PathBuf {
        self.resolve(&self.database)
    }

    /// The watched folders with their paths made absolute against the configuration's folder.
    pub fn resolved_folders(&self) -> Vec<WatchFolder> {
        self.folders
            .iter()
            .map(|f| {
                let mut f = f.clone();
                f.path = self.resolve(&f.path);
                f
            })
            .collect()
    }

    /// The mail settings with the file transport's folder made absolute.
    pub fn resolved_mail(&self) -> MailConfig {
        let mut m = self.mail.clone();
        m.dir = self.resolve(&m.dir);
        m
    }

    pub fn quarantine_dir(&self) -> PathBuf {
        self.resolve(&self.quarantine)
    }

    /// The watched folder (and so profile) a file belongs to: the folder whose path is the
    /// longest prefix of the file's path.
    pub fn folder_for(&self, file: &Path) -> Option<&WatchFolder> {
        let file = std::fs::canonicalize(file).unwrap_or_else(|_| file.to_path_buf());
        self.folders
            .iter()
            .filter_map(|f| {
                let root = self.resolve(&f.path);
                let root = std::fs::canonicalize(&root).unwrap_or(root);
                file.starts_with(&root)
                    .then_some((root.components().count(), f))
            })
            .max_by_key(|(n, _)| *n)
            .map(|(_, f)| f)
    }
}

#[cfg(test)]
mod tests {
    use super::Web;

    #[test]
    fn lot_links_are_percent_encoded_under_the_public_address() {
        let w = Web {
            listen: "127.0.0.1:8470".into(),
            token_file: None,
            public_url: None,
        };
        assert_eq!(
            w.lot_url("PD-C-2611-A"),
            "http://127.0.0.1:8470/lots/PD-C-2611-A"
        );
        let p = Web {
            public_url: Some("https://notebook.plant.example/kv4/".into()),
            ..w
        };
        assert_eq!(
            p.lot_url("A/B <1>"),
            "https://notebook.plant.example/kv4/lots/A%2FB%20%3C1%3E"
        );
    }
}
