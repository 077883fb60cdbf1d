//! Many plants, one view: shipping this site's events to the company's central
//! PostgreSQL store, verifying every site's chain there, comparing this site's head with
//! the central copy, and the company's lots.
//!
//! Shipping only reads the site's database (its own read-only connection, under WAL), so
//! it never holds up ingestion; while the server is away the service retries with backoff
//! and the events wait in the site's database, which stays the one record of the site.

use std::time::Duration;

use serde::Serialize;
use tokio_postgres::Client;

use super::error::{NotebookError, Result};
use crate::audit::Finding;
use crate::config::Config;
use crate::model::chain::{self, ChainKey, GENESIS, Head, KEYED_KIND};
use crate::store::central::{self as central, CentralError, CentralEvent, CentralLot, Target};
use crate::store::replay::StoredEvent;

impl From<CentralError> for NotebookError {
    fn from(e: CentralError) -> Self {
        NotebookError::Refused(e.to_string())
    }
}

/// The environment variables that override the configuration.
pub const URL_ENV: &str = "TURNBOOK_CENTRAL_URL";
pub const PASSWORD_ENV: &str = "TURNBOOK_CENTRAL_PASSWORD";

/// The central store as configured: `TURNBOOK_CENTRAL_URL` or `[central] url`; the
/// password from `TURNBOOK_CENTRAL_PASSWORD` or `[central] password_file`. None when
/// no URL is given anywhere.
pub fn target(cfg: &Config) -> Result<Option<Target>> {
    let section = cfg.central.clone().unwrap_or_default();
    let url = std::env::var(URL_ENV)
        .ok()
        .filter(|u| !u.trim().is_empty())
        .or(section.url);
    let Some(url) = url else {
        return Ok(None);
    };
    let password = match std::env::var(PASSWORD_ENV).ok().filter(|p| !p.is_empty()) {
        Some(p) => Some(p),
        None => match &section.password_file {
            Some(f) => {
                let path = cfg.resolve(f);
                let text = std::fs::read_to_string(&path).map_err(|e| {
                    NotebookError::Usage(format!("central.password_file {}: {e}", path.display()))
                })?;
                Some(text.trim_end_matches(['\r', '\n']).to_string())
            }
            None => None,
        },
    };
    Ok(Some(Target {
        url,
        password,
        ca_file: section.ca_file.map(|f| cfg.resolve(&f)),
    }))
}

fn required_target(cfg: &Config) -> Result<Target> {
    target(cfg)?.ok_or_else(|| {
        NotebookError::Usage(format!(
            "no central store configured: set [central] url in {} or {URL_ENV}",
            cfg.source.display()
        ))
    })
}

fn site_id(cfg: &Config) -> Result<String> {
    cfg.site_id().map(str::to_string).ok_or_else(|| {
        NotebookError::Usage(format!(
            "no site id: set [site] id = \"...\" in {}",
            cfg.source.display()
        ))
    })
}

fn batch_events(cfg: &Config) -> usize {
    cfg.central.as_ref().map_or(5000, |c| c.batch_events)
}

/// A single-threaded runtime on a thread of its own, for the one-off commands (callable
/// from inside another runtime too).
fn block_on<T: Send + 'static>(
    work: impl std::future::Future<Output = Result<T>> + Send + 'static,
) -> Result<T> {
    std::thread::spawn(move || {
        tokio::runtime::Builder::new_current_thread()
            .enable_all()
            .build()
            .map_err(|e| NotebookError::Refused(format!("cannot start the async runtime: {e}")))?
            .block_on(work)
    })
    .join()
    .map_err(|_| NotebookError::Refused("the central store's task panicked".into()))?
}

/// What one shipping round did.
#[derive(Debug, Clone, Serialize)]
pub struct ShipReport {
    pub site: String,
    /// Events the central store did not have and now has.
    pub shipped: u64,
    /// Events sent that it had already (another shipper was quicker).
    pub already_there: u64,
    /// Lots whose computed figures were replaced (or removed) at the central store.
    pub figures_replaced: u64,
    /// The site's newest event at the central store after the round.
    #[serde(serialize_with = "head_text")]
    pub central_head: Option<Head>,
}

/// A head in JSON as `SEQ:HASH`, as `verify --head` takes it.
fn head_text<S: serde::Serializer>(h: &Option<Head>, s: S) -> std::result::Result<S::Ok, S::Error> {
    match h {
        Some(h) => s.serialize_str(&h.to_string()),
        None => s.serialize_none(),
    }
}

/// Connect, make the central schema if missing and record the site.
async fn open_central(cfg: &Config, target: &Target, site: &str) -> Result<Client> {
    let mut client = central::connect(target).await?;
    central::prepare(&mut client).await?;
    central::register_site(&client, site, cfg.time_zone.as_deref()).await?;
    Ok(client)
}

/// The central head, after checking that this site's event of that number is the same
/// event: a central copy that this database does not continue is never shipped onto.
async fn agreed_head(client: &Client, db: &std::path::Path, site: &str) -> Result<Option<Head>> {
    let Some(head) = central::head(client, site).await? else {
        return Ok(None);
    };
    let (db, seq) = (db.to_path_buf(), head.seq);
    let local = tokio::task::spawn_blocking(move || {
        central::local_hash(&central::open_local_reader(&db)?, seq)
    })
    .await
    .map_err(|e| NotebookError::Refused(format!("the local reader failed: {e}")))??;
    match local {
        Some(h) if h == head.hash => Ok(Some(head)),
        Some(h) => Err(NotebookError::Refused(format!(
            "site {site}: event {} here has hash {h}, the central store's has {}: this \
             database does not continue what was shipped (rewritten here, or another \
             site with the same id); nothing shipped, run `turnbook verify`",
            head.seq, head.hash
        ))),
        None => Err(NotebookError::Refused(format!(
            "site {site}: the central store holds events up to {}, this database has no \
             event {}: events were deleted here (or another site has the same id); \
             nothing shipped, run `turnbook verify`",
            head.seq, head.seq
        ))),
    }
}

fn connections(cfg: &Config) -> usize {
    cfg.central.as_ref().map_or(2, |c| c.connections).max(1)
}

/// Connect as many times as configured: the first connection makes the schema if missing
/// and records the site.
async fn open_links(cfg: &Config, target: &Target, site: &str) -> Result<Vec<Client>> {
    let mut links = vec![open_central(cfg, target, site).await?];
    for _ in 1..connections(cfg) {
        links.push(central::connect(target).await?);
    }
    for link in &links {
        central::prepare_writer(link).await?;
    }
    Ok(links)
}

/// One batch for a writer: its events, the commit of the batch before it (none for the
/// round's first) and the signal of its own commit.
struct Job {
    number: u64,
    events: Vec<StoredEvent>,
    after: Option<tokio::sync::oneshot::Receiver<()>>,
    done: tokio::sync::oneshot::Sender<()>,
}

/// What a writer did in a round: events sent and new; or the failed batch's number and why.
type Written = std::result::Result<(u64, u64), (u64, NotebookError)>;

/// Ship every event the central store lacks, in batches, from its head on. A reader
/// thread fetches batches from SQLite; the connections write batches at the same time,
/// but each commits only after the batch before it has: the central copy of a site is
/// always a gapless prefix of its chain (resuming from its head is right, and `central
/// verify` never sees a hole that a batch still in flight would fill).
async fn ship_with(cfg: &Config, links: &mut Vec<Client>, site: &str) -> Result<ShipReport> {
    let db = cfg.database_path();
    let first = links
        .first()
        .ok_or_else(|| NotebookError::Refused("no central connection".into()))?;
    let from = agreed_head(first, &db, site).await?;
    let mut report = ShipReport {
        site: site.to_string(),
        shipped: 0,
        already_there: 0,
        figures_replaced: 0,
        central_head: from.clone(),
    };
    let (tx, mut rx) = tokio::sync::mpsc::channel::<Vec<StoredEvent>>(2);
    let reader = spawn_reader(db, from.map_or(0, |h| h.seq), batch_events(cfg), tx);
    let mut queues = Vec::new();
    let mut writers = Vec::new();
    for client in std::mem::take(links) {
        let (q, jobs) = tokio::sync::mpsc::channel::<Job>(1);
        queues.push(q);
        writers.push(tokio::spawn(batch_writer(client, site.to_string(), jobs)));
    }
    let (mut number, mut after, mut last) = (0u64, None, None);
    while let Some(events) = rx.recv().await {
        let (done, next) = tokio::sync::oneshot::channel();
        let head = events.last().map(|e| Head {
            seq: e.seq,
            hash: e.hash.clone(),
        });
        let job = Job {
            number,
            events,
            after: after.replace(next),
            done,
        };
        let queue = &queues[(number % queues.len() as u64) as usize];
        if queue.send(job).await.is_err() {
            break; // that writer failed: its error is reported below
        }
        number += 1;
        last = head.or(last);
    }
    drop(rx);
    drop(queues);
    let mut failed: Option<(u64, NotebookError)> = None;
    for w in writers {
        let (client, written) = w
            .await
            .map_err(|e| NotebookError::Refused(format!("a central writer failed: {e}")))?;
        links.push(client);
        match written {
            Ok((sent, new)) => {
                report.shipped += new;
                report.already_there += sent - new;
            }
            Err((n, e)) if failed.as_ref().is_none_or(|(m, _)| n < *m) => failed = Some((n, e)),
            Err(_) => {}
        }
    }
    if let Some((_, e)) = failed {
        return Err(e);
    }
    reader
        .await
        .map_err(|e| NotebookError::Refused(format!("the local reader failed: {e}")))??;
    if number > 0 {
        central::mark_shipped(&links[0], site).await?;
        report.central_head = last.or(report.central_head);
    }
    report.figures_replaced = ship_figures(cfg, &mut links[0], site).await?;
    Ok(report)
}

/// Lots whose figures are replaced in one central transaction.
const FIGURES_LOTS_PER_BATCH: usize = 200;

/// Bring the central copy of the site's computed figures up to date: the lots whose
/// figures the site recomputed since (or that the center lacks) are replaced whole, lots
/// the site no longer holds figures for are removed. Derived rows, not events: nothing
/// here touches the chain. Returns how many lots changed.
async fn ship_figures(cfg: &Config, client: &mut Client, site: &str) -> Result<u64> {
    let held = central::central_figure_versions(client, site).await?;
    let db = cfg.database_path();
    let at = db.clone();
    let local = local_read(move || central::local_figure_versions(&at)).await?;
    let here: std::collections::HashSet<&str> = local.iter().map(|(l, _)| l.as_str()).collect();
    let gone: Vec<String> = held
        .keys()
        .filter(|l| !here.contains(l.as_str()))
        .cloned()
        .collect();
    let stale: Vec<String> = local
        .into_iter()
        .filter(|(lot, v)| held.get(lot) != Some(v))
        .map(|(lot, _)| lot)
        .collect();
    let mut changed = gone.len() as u64;
    if !gone.is_empty() {
        central::replace_figures(client, site, &central::FiguresBatch::default(), &gone).await?;
    }
    for chunk in stale.chunks(FIGURES_LOTS_PER_BATCH) {
        let lots = chunk.to_vec();
        let at = db.clone();
        let batch = local_read(move || central::local_figures(&at, &lots)).await?;
        central::replace_figures(client, site, &batch, &[]).await?;
        changed += chunk.len() as u64;
    }
    Ok(changed)
}

/// Run a read of the site's database off the async threads.
async fn local_read<T: Send + 'static>(
    read: impl FnOnce() -> std::result::Result<T, CentralError> + Send + 'static,
) -> Result<T> {
    Ok(tokio::task::spawn_blocking(read)
        .await
        .map_err(|e| NotebookError::Refused(format!("the local reader failed: {e}")))??)
}

/// The reader: batches of the events after `after`, in order, until there are no more.
fn spawn_reader(
    db: std::path::PathBuf,
    after: i64,
    batch: usize,
    tx: tokio::sync::mpsc::Sender<Vec<StoredEvent>>,
) -> tokio::task::JoinHandle<Result<()>> {
    tokio::task::spawn_blocking(move || -> Result<()> {
        let conn = central::open_local_reader(&db)?;
        let mut after = after;
        loop {
            let events = central::local_events_after(&conn, after, batch)?;
            let Some(last) = events.last() else {
                return Ok(());
            };
            after = last.seq;
            if tx.blocking_send(events).is_err() {
                return Ok(());
            }
        }
    })
}

/// One connection's writer: its batches in turn, each in a transaction that commits after
/// the batch before it (on whichever connection) has; a failure rolls back its batch and
/// every later one.
async fn batch_writer(
    mut client: Client,
    site: String,
    mut jobs: tokio::sync::mpsc::Receiver<Job>,
) -> (Client, Written) {
    let (mut sent, mut new) = (0u64, 0u64);
    while let Some(job) = jobs.recv().await {
        let number = job.number;
        sent += job.events.len() as u64;
        match write_in_turn(&mut client, &site, job).await {
            Ok(n) => new += n,
            Err(e) => return (client, Err((number, e))),
        }
    }
    (client, Ok((sent, new)))
}

async fn write_in_turn(client: &mut Client, site: &str, job: Job) -> Result<u64> {
    let turn = async {
        match job.after {
            Some(before) => before.await.is_ok(),
            None => true,
        }
    };
    match central::write_batch(client, site, &job.events, turn).await? {
        Some(n) => {
            let _ = job.done.send(());
            Ok(n)
        }
        None => Err(NotebookError::Refused(format!(
            "batch {} not committed: an earlier batch failed",
            job.number
        ))),
    }
}

/// `turnbook ship`: one round of shipping, now.
pub fn ship_now(cfg: &Config) -> Result<ShipReport> {
    let target = required_target(cfg)?;
    let site = site_id(cfg)?;
    let cfg = cfg.clone();
    block_on(async move {
        let mut links = open_links(&cfg, &target, &site).await?;
        ship_with(&cfg, &mut links, &site).await
    })
}

/// First wait after a failed round; it doubles up to [`MAX_BACKOFF`].
const FIRST_BACKOFF: Duration = Duration::from_secs(1);
const MAX_BACKOFF: Duration = Duration::from_secs(60);

/// The service's shipper, when a site id and a central store are configured and shipping
/// is on: None otherwise.
pub fn shipper(cfg: &Config) -> Result<Option<super::SideTask>> {
    let (Some(site), Some(target)) = (cfg.site_id(), target(cfg)?) else {
        return Ok(None);
    };
    if !cfg.central.as_ref().is_none_or(|c| c.ship) {
        return Ok(None);
    }
    let (cfg, site) = (cfg.clone(), site.to_string());
    Ok(Some((
        "central shipper",
        Box::new(move |ctx: super::ServiceContext| {
            Box::pin(ship_loop(cfg, target, site, ctx.stop))
        }),
    )))
}

/// Ship, then wait the interval (or, after a failure, the backoff) until told to stop.
async fn ship_loop(
    cfg: Config,
    target: Target,
    site: String,
    mut stop: tokio::sync::watch::Receiver<bool>,
) {
    let interval = Duration::from_secs(cfg.central.as_ref().map_or(2, |c| c.interval_seconds));
    let mut backoff = FIRST_BACKOFF;
    let mut links: Vec<Client> = Vec::new();
    while !*stop.borrow() {
        let round = async {
            if links.is_empty() || links.iter().any(Client::is_closed) {
                links = open_links(&cfg, &target, &site).await?;
            }
            ship_with(&cfg, &mut links, &site).await
        };
        let wait = match round.await {
            Ok(r) => {
                if r.shipped > 0 {
                    tracing::info!(site = %site, shipped = r.shipped,
                        central_head = r.central_head.as_ref().map_or(0, |h| h.seq),
                        "events shipped to the central store");
                }
                backoff = FIRST_BACKOFF;
                interval
            }
            Err(e) => {
                links.clear();
                tracing::warn!(site = %site, error = %e, retry_in_s = backoff.as_secs(),
                    "shipping to the central store failed; the events wait here");
                let w = backoff;
                backoff = (backoff * 2).min(MAX_BACKOFF);
                w
            }
        };
        tokio::select! {
            _ = tokio::time::sleep(wait) => {}
            r = stop.changed() => if r.is_err() { return },
        }
    }
}

/// The site's head compared with its central copy, for `verify`: a finding when the
/// central store holds an event this database lacks (deleted here) or holds with another
/// hash (rewritten here), or when the central store cannot be asked. Nothing when no
/// central store or no site id is configured.
pub(crate) fn check_against_central(cfg: &Config, local: Option<Head>) -> Result<Vec<Finding>> {
    let (Some(site), Some(target)) = (cfg.site_id().map(str::to_string), target(cfg)?) else {
        return Ok(Vec::new());
    };
    let db = cfg.database_path();
    let asked = block_on(async move {
        let client = central::connect(&target).await?;
        let Some(head) = central::head(&client, &site)
            .await
            .or_else(missing_schema)?
        else {
            return Ok(None);
        };
        let info = central::event_info(&client, &site, head.seq).await?;
        let local_hash = tokio::task::spawn_blocking(move || {
            central::local_hash(&central::open_local_reader(&db)?, head.seq)
        })
        .await
        .map_err(|e| NotebookError::Refused(format!("the local reader failed: {e}")))??;
        Ok(Some((head, info, local_hash)))
    });
    let finding = |row: String, stored: String, expected: String| Finding {
        table: "events".into(),
        row,
        field: "hash (central copy)".into(),
        stored,
        expected,
    };
    match asked {
        Err(e) => Ok(vec![Finding {
            table: "central".into(),
            row: cfg.site_id().unwrap_or_default().to_string(),
            field: "head".into(),
            stored: format!("not compared: {e}"),
            expected: "the central copy's head, to compare this chain's with".into(),
        }]),
        Ok(None) => Ok(Vec::new()),
        Ok(Some((head, info, local_hash))) => {
            let named = info.map_or_else(String::new, |i| {
                format!(" ({} at {}, subject {})", i.kind, i.at, i.subject)
            });
            let expected = format!("{}, as shipped to the central store{named}", head.hash);
            Ok(match local_hash {
                Some(h) if h == head.hash => Vec::new(),
                Some(h) => vec![finding(head.seq.to_string(), h, expected)],
                None => vec![finding(
                    head.seq.to_string(),
                    format!(
                        "no such event: this database ends at event {}",
                        local.map_or(0, |h| h.seq)
                    ),
                    expected,
                )],
            })
        }
    }
}

/// A central store where nothing was shipped yet has no schema: no head.
fn missing_schema(e: CentralError) -> std::result::Result<Option<Head>, CentralError> {
    none_shipped(e, None)
}

/// `empty` when the central schema does not exist yet (nothing was ever shipped), so
/// that reading needs no right to create it; any other error as it is.
fn none_shipped<T>(e: CentralError, empty: T) -> std::result::Result<T, CentralError> {
    match &e {
        CentralError::Postgres(p)
            if p.code() == Some(&tokio_postgres::error::SqlState::UNDEFINED_TABLE) =>
        {
            Ok(empty)
        }
        _ => Err(e),
    }
}

/// The company's lots by site.
pub fn central_lots(cfg: &Config) -> Result<Vec<CentralLot>> {
    let target = required_target(cfg)?;
    block_on(async move {
        let client = central::connect(&target).await?;
        Ok(central::lots(&client)
            .await
            .or_else(|e| none_shipped(e, Vec::new()))?)
    })
}

/// One site's chain as the central store holds it.
#[derive(Debug, Clone, Serialize)]
pub struct SiteChain {
    pub site: String,
    pub events: i64,
    #[serde(serialize_with = "head_text")]
    pub head: Option<Head>,
    /// Links recomputed and found right (plain ones, and keyed ones with the site's key).
    pub links_checked: i64,
    /// Keyed links that could not be recomputed: no key file for the site was given.
    pub keyed_unchecked: i64,
    /// The first broken link, if any (the walk stops there).
    pub broken: Option<BrokenLink>,
}

/// The first event of a site's central chain that is not what it should be.
#[derive(Debug, Clone, Serialize)]
pub struct BrokenLink {
    pub seq: i64,
    pub kind: String,
    pub at: String,
    pub problem: String,
}

impl std::fmt::Display for BrokenLink {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(
            f,
            "event {} ({} at {}): {}",
            self.seq, self.kind, self.at, self.problem
        )
    }
}

/// `turnbook central verify`: every site's chain.
#[derive(Debug, Clone, Serialize)]
pub struct CentralVerifyReport {
    pub sites: Vec<SiteChain>,
}

impl CentralVerifyReport {
    pub fn ok(&self) -> bool {
        self.sites.iter().all(|s| s.broken.is_none())
    }
}

/// Recompute every site's chain in the central store (see [`ChainWalk`]).
pub fn verify_central(cfg: &Config) -> Result<CentralVerifyReport> {
    let target = required_target(cfg)?;
    let mut keys = Vec::new();
    for (site, path) in cfg.central.iter().flat_map(|c| c.site_keys.iter()) {
        let path = cfg.resolve(path);
        let key = crate::audit::key::load(&path)?.ok_or_else(|| {
            NotebookError::Usage(format!(
                "central.site_keys.{site}: no key file {}",
                path.display()
            ))
        })?;
        keys.push((site.clone(), key));
    }
    block_on(async move {
        let client = central::connect(&target).await?;
        let mut sites = Vec::new();
        for site in central::sites(&client)
            .await
            .or_else(|e| none_shipped(e, Vec::new()))?
        {
            let key = keys
                .iter()
                .find(|(s, _)| *s == site)
                .map(|(_, k)| k.clone());
            let mut walk = ChainWalk::new(&site, key);
            central::for_each_event(&client, &site, |e| walk.step(e)).await?;
            sites.push(walk.finish());
        }
        Ok(CentralVerifyReport { sites })
    })
}

/// The walk along one site's central chain: sequence numbers without gaps from 1, each
/// event's `prev_hash` the hash of the one before, each hash recomputed from the event's
/// content (plain links always; keyed links, after the `chain-keyed` event or from the
/// first event, with the site's key when given), the key proof of the switch, and the
/// site named inside each payload (when named) the row's site.
pub struct ChainWalk {
    report: SiteChain,
    key: Option<ChainKey>,
    prev: String,
    keyed: bool,
}

impl ChainWalk {
    pub fn new(site: &str, key: Option<ChainKey>) -> Self {
        ChainWalk {
            report: SiteChain {
                site: site.to_string(),
                events: 0,
                head: None,
                links_checked: 0,
                keyed_unchecked: 0,
                broken: None,
            },
            key,
            prev: GENESIS.to_string(),
            keyed: false,
        }
    }

    /// Take the next event; false once a broken link is found.
    pub fn step(&mut self, c: CentralEvent) -> bool {
        let e = &c.event;
        match self.problem(&c) {
            Some(problem) => {
                self.report.broken = Some(BrokenLink {
                    seq: e.seq,
                    kind: e.kind.clone(),
                    at: e.at.clone(),
                    problem,
                });
                false
            }
            None => {
                self.report.events += 1;
                self.report.head = Some(Head {
                    seq: e.seq,
                    hash: e.hash.clone(),
                });
                self.prev = e.hash.clone();
                true
            }
        }
    }

    fn problem(&mut self, c: &CentralEvent) -> Option<String> {
        let e = &c.event;
        let expected_seq = self.report.events + 1;
        if e.seq != expected_seq {
            return Some(format!(
                "event {expected_seq} is missing (the next one held is {})",
                e.seq
            ));
        }
        if e.prev_hash != self.prev {
            return Some(format!(
                "prev_hash {} is not the hash of the event before ({})",
                e.prev_hash, self.prev
            ));
        }
        if let Some(s) = &c.payload_site
            && *s != self.report.site
        {
            return Some(format!("its payload names site {s}, not this one"));
        }
        let plain = || {
            chain::event_hash(
                &e.prev_hash,
                e.seq,
                &e.at,
                &e.actor,
                &e.kind,
                &e.subject,
                &e.payload,
            )
        };
        if !self.keyed {
            if e.hash == plain() {
                self.report.links_checked += 1;
                if e.kind == KEYED_KIND {
                    self.keyed = true;
                    return self.switch_problem(e);
                }
                return None;
            }
            if e.seq != 1 {
                return Some("its hash is not the hash of its content".into());
            }
            // Not plain at the first event: the chain is keyed from its start.
            self.keyed = true;
        }
        self.keyed_link_problem(e)
    }

    fn keyed_link_problem(&mut self, e: &StoredEvent) -> Option<String> {
        let Some(key) = &self.key else {
            self.report.keyed_unchecked += 1;
            return None;
        };
        let keyed = chain::keyed_event_hash(
            key,
            &e.prev_hash,
            e.seq,
            &e.at,
            &e.actor,
            &e.kind,
            &e.subject,
            &e.payload,
        );
        if keyed == e.hash {
            self.report.links_checked += 1;
            None
        } else {
            Some("its hash is not the keyed hash of its content under the site's key".into())
        }
    }

    /// With the key, the switch's proof must be the key's (see [`chain::key_proof`]).
    fn switch_problem(&self, e: &StoredEvent) -> Option<String> {
        let key = self.key.as_ref()?;
        let proof = serde_json::from_str::<serde_json::Value>(&e.payload)
            .ok()
            .and_then(|v| {
                v.get("key_proof")
                    .and_then(|p| p.as_str())
                    .map(String::from)
            });
        (proof.as_deref() != Some(chain::key_proof(key, &e.prev_hash).as_str()))
            .then(|| "its key proof is not the site's key's".to_string())
    }

    pub fn finish(self) -> SiteChain {
        self.report
    }
}
