//! The running watcher: event watchers and scanners feed sightings into one loop, which
//! settles files and hands them, in arrival order, to one worker thread that calls the sink.
//!
//! ```text
//! notify threads ─┐
//! scanner tasks ──┴─ sightings ─▶ loop: settle tracker ─▶ jobs ─▶ worker thread ─▶ FileSink
//!                                   ▲                                  │
//!                                   └────────────── outcomes ◀─────────┘
//! ```

use std::collections::HashMap;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::path::{Path, PathBuf};
use std::sync::Arc;
use std::sync::atomic::{AtomicBool, Ordering};
use std::time::{Duration, Instant};

use notify::{RecommendedWatcher, RecursiveMode, Watcher};
use tokio::sync::{mpsc, watch};
use tokio::task::JoinHandle;

use super::error::WatchError;
use super::events::classify;
use super::folder::{WatchFolder, WatchMode};
use super::scan::{FileFound, PollMemory, Refused, Root, Skip};
use super::settle::{SettleTracker, Signal, Stamp, Verdict};
use super::{FileSink, WatchStats};

/// How long shutdown waits for the sink call in progress. Below the 5 s promised to the
/// caller, leaving time to tear down; systemd's default stop timeout is far longer.
pub const SHUTDOWN_GRACE: Duration = Duration::from_millis(4000);

/// A file seen by an event or a scan, already checked against the folder's rules.
#[derive(Debug)]
struct Sighting {
    root: usize,
    found: FileFound,
    signal: Signal,
}

/// What events and scans send the loop: a file to settle, or an entry to report.
#[derive(Debug)]
enum Seen {
    File(Sighting),
    Refused {
        root: usize,
        refused: Refused,
    },
    /// A scan of the folder (its root index) has sent everything it found.
    Scanned(usize),
}

/// A settled file for the worker, or (with `refusal`) an entry to report as refused.
#[derive(Debug)]
struct Job {
    root: usize,
    path: PathBuf,
    key: PathBuf,
    stamp: Stamp,
    refusal: Option<String>,
}

/// What the worker reports back after one sink call.
#[derive(Debug)]
struct Outcome {
    job: Job,
    result: Result<(), String>,
}

/// Watches `folders` and offers each settled file to `sink` until `shutdown` turns true
/// (or its sender is dropped: then nobody could stop the watcher any more).
///
/// Start-up scans every folder, so files that landed while the service was down are offered
/// too. Errors only at start (invalid entry, missing folder, overlapping entries, event
/// set-up); once running, per-file problems are logged and counted in the returned stats.
pub async fn run(
    folders: Vec<WatchFolder>,
    sink: Arc<dyn FileSink>,
    mut shutdown: watch::Receiver<bool>,
) -> anyhow::Result<WatchStats> {
    let roots: Arc<[Root]> = prepare(&folders)?.into();
    let folders: Arc<[WatchFolder]> = folders.into();
    if roots.is_empty() {
        tracing::warn!("no folders configured; waiting for shutdown");
    }
    let (seen_tx, mut seen_rx) = mpsc::unbounded_channel::<Seen>();

    // Events first, then the catch-up scan: a file landing in between is seen twice at
    // worst (harmless), never missed.
    let mut watchers: Vec<RecommendedWatcher> = Vec::new();
    for root in roots
        .iter()
        .filter(|r| folders[r.index].mode == WatchMode::Events)
    {
        watchers.push(start_events(root.clone(), seen_tx.clone())?);
    }
    let scanners: Vec<JoinHandle<()>> = roots
        .iter()
        .map(|root| {
            let folder = &folders[root.index];
            let every =
                (folder.mode == WatchMode::Poll).then(|| Duration::from_secs(folder.poll_interval));
            tokio::spawn(scanner(root.clone(), every, seen_tx.clone(), sink.clone()))
        })
        .collect();
    for root in roots.iter() {
        let folder = &folders[root.index];
        tracing::info!(folder = %crate::logs::shown_path(&root.canonical), profile = %folder.profile, mode = ?folder.mode,
            recursive = folder.recursive, "watching");
    }
    drop(seen_tx);

    let stop = Arc::new(AtomicBool::new(false));
    let (job_tx, job_rx) = std::sync::mpsc::channel::<Job>();
    let (done_tx, mut done_rx) = mpsc::unbounded_channel::<Outcome>();
    start_workers(job_rx, done_tx, &sink, &folders, &stop)?;

    let mut state = State::new(folders.clone(), roots.clone(), job_tx);
    let mut catching_up = CatchUp::new(roots.len());
    if !*shutdown.borrow_and_update() {
        loop {
            catching_up.check(&state, sink.as_ref());
            let deadline = state.next_deadline();
            tokio::select! {
                changed = shutdown.changed() => {
                    if changed.is_err() || *shutdown.borrow_and_update() {
                        break;
                    }
                }
                Some(seen) = seen_rx.recv() => match seen {
                    Seen::File(sighting) => state.sighted(sighting),
                    Seen::Refused { root, refused } => state.refused_entry(root, refused),
                    Seen::Scanned(root) => catching_up.scanned(root),
                },
                Some(outcome) = done_rx.recv() => state.finished(outcome),
                () = sleep_until(deadline) => state.recheck(),
            }
        }
    }

    // Stop taking files: the worker skips queued jobs, the call in progress may finish.
    let shutdown_at = tokio::time::Instant::now();
    stop.store(true, Ordering::SeqCst);
    sink.stopping();
    state.job_tx = None;
    drop(watchers);
    for scanner in &scanners {
        scanner.abort();
    }
    tracing::info!(
        settling = state.tracker.len(),
        "shutting down; files still settling are offered at the next start"
    );
    let drained = tokio::time::timeout_at(shutdown_at + SHUTDOWN_GRACE, async {
        while let Some(outcome) = done_rx.recv().await {
            state.finished(outcome);
        }
    })
    .await;
    if drained.is_err() {
        tracing::warn!(
            grace_ms = SHUTDOWN_GRACE.as_millis() as u64,
            "the sink call in progress did not finish in time; leaving it behind"
        );
    }
    Ok(state.stats)
}

/// Start the ingest worker, and the large-file lane's when the sink has one.
fn start_workers(
    jobs: std::sync::mpsc::Receiver<Job>,
    done: mpsc::UnboundedSender<Outcome>,
    sink: &Arc<dyn FileSink>,
    folders: &Arc<[WatchFolder]>,
    stop: &Arc<AtomicBool>,
) -> Result<(), WatchError> {
    let large_lane = match sink.large_lane_from() {
        Some(from) => {
            let (large_tx, large_rx) = std::sync::mpsc::channel::<Job>();
            let (sink, folders, stop) = (Arc::clone(sink), Arc::clone(folders), Arc::clone(stop));
            let done = done.clone();
            std::thread::Builder::new()
                .name("turnbook-ingest-large".into())
                .spawn(move || large_worker(large_rx, done, sink, folders, stop))
                .map_err(WatchError::Worker)?;
            Some((from, large_tx))
        }
        None => None,
    };
    let (sink, folders, stop) = (Arc::clone(sink), Arc::clone(folders), Arc::clone(stop));
    let lanes = Lanes {
        jobs,
        large: large_lane,
        done,
    };
    std::thread::Builder::new()
        .name("turnbook-ingest".into())
        .spawn(move || worker(lanes, sink, folders, stop))
        .map_err(WatchError::Worker)?;
    Ok(())
}

/// Whether the start-up catch-up is over: every folder scanned once and every file found
/// settled and handled. Told to the sink once ([`FileSink::caught_up`]).
struct CatchUp {
    /// Per folder (root index): scanned at least once.
    scanned: Vec<bool>,
    told: bool,
}

impl CatchUp {
    fn new(folders: usize) -> Self {
        CatchUp {
            scanned: vec![false; folders],
            told: false,
        }
    }

    fn scanned(&mut self, root: usize) {
        if let Some(s) = self.scanned.get_mut(root) {
            *s = true;
        }
    }

    fn check(&mut self, state: &State, sink: &dyn FileSink) {
        if !self.told
            && self.scanned.iter().all(|s| *s)
            && state.tracker.is_empty()
            && state.in_flight.is_empty()
        {
            self.told = true;
            sink.caught_up();
        }
    }
}

/// Sleeps until the next re-check, or forever when nothing is settling (no idle polling).
async fn sleep_until(deadline: Option<Instant>) {
    match deadline {
        Some(at) => tokio::time::sleep_until(tokio::time::Instant::from_std(at)).await,
        None => std::future::pending::<()>().await,
    }
}

/// Validates every entry, resolves the folders and refuses entries that overlap.
fn prepare(folders: &[WatchFolder]) -> Result<Vec<Root>, WatchError> {
    let mut roots = Vec::with_capacity(folders.len());
    for (index, folder) in folders.iter().enumerate() {
        folder.validate(index)?;
        let unreachable = |reason: String| WatchError::Unreachable {
            index,
            path: folder.path.clone(),
            reason,
        };
        let canonical =
            std::fs::canonicalize(&folder.path).map_err(|e| unreachable(e.to_string()))?;
        if !canonical.is_dir() {
            return Err(unreachable("not a directory".into()));
        }
        let ignore = folder
            .ignore_set()
            .map_err(|reason| WatchError::InvalidFolder {
                index,
                key: "ignore",
                reason,
            })?;
        roots.push(Root {
            index,
            canonical,
            recursive: folder.recursive,
            ignore,
        });
    }
    for (i, a) in roots.iter().enumerate() {
        for b in &roots[i + 1..] {
            let overlap = if a.canonical == b.canonical
                || (a.recursive && b.canonical.starts_with(&a.canonical))
            {
                Some((a, b))
            } else if b.recursive && a.canonical.starts_with(&b.canonical) {
                Some((b, a))
            } else {
                None
            };
            if let Some((outer, inner)) = overlap {
                return Err(WatchError::Overlap {
                    first: outer.index,
                    second: inner.index,
                    path: inner.canonical.clone(),
                });
            }
        }
    }
    Ok(roots)
}

/// Starts operating-system file events for one folder. The handler runs on notify's
/// thread and does the file checks there, so the loop only sees candidate files.
fn start_events(
    root: Root,
    seen: mpsc::UnboundedSender<Seen>,
) -> Result<RecommendedWatcher, WatchError> {
    let path = root.canonical.clone();
    let index = root.index;
    let mode = if root.recursive {
        RecursiveMode::Recursive
    } else {
        RecursiveMode::NonRecursive
    };
    let handler = move |event: notify::Result<notify::Event>| match event {
        Ok(event) => {
            let meaning = classify(&event);
            if meaning.rescan {
                tracing::warn!(folder = %crate::logs::shown_path(&root.canonical), "file events were lost; rescanning");
                send_all(&seen, root.index, root.scan_all(&root.canonical));
            }
            for (path, signal) in meaning.look_at {
                match root.examine(&path) {
                    Ok(found) => {
                        let _ = seen.send(Seen::File(Sighting {
                            root: root.index,
                            found,
                            signal,
                        }));
                    }
                    Err(Skip::Directory) if root.recursive && meaning.arrived.contains(&path) => {
                        send_all(&seen, root.index, root.scan_all(&path));
                    }
                    Err(skip) => {
                        if let Some(refused) = root.refused_entry(&path, skip) {
                            let root = root.index;
                            let _ = seen.send(Seen::Refused { root, refused });
                        }
                    }
                }
            }
        }
        Err(error) => {
            tracing::warn!(folder = %crate::logs::shown_path(&root.canonical), %error, "file event error")
        }
    };
    let events = |source| WatchError::Events {
        index,
        path: path.clone(),
        source,
    };
    // Do not descend into linked directories: their files would be refused anyway when
    // they resolve outside the folder, and each costs a kernel watch.
    let config = notify::Config::default().with_follow_symlinks(false);
    let mut watcher = RecommendedWatcher::new(handler, config).map_err(events)?;
    watcher.watch(&path, mode).map_err(events)?;
    Ok(watcher)
}

fn send_all(
    seen: &mpsc::UnboundedSender<Seen>,
    root: usize,
    (files, refused): (Vec<FileFound>, Vec<Refused>),
) {
    // The loop is gone only during shutdown; nothing left to tell then.
    for found in files {
        let _ = seen.send(Seen::File(Sighting {
            root,
            found,
            signal: Signal::Seen,
        }));
    }
    for refused in refused {
        let _ = seen.send(Seen::Refused { root, refused });
    }
}

/// Scans a folder once (catch-up), or every `every` in poll mode. Directory listing may
/// block on a slow share, so it runs on the blocking pool. Poll passes after the first
/// send only what changed (see [`Root::scan_changes`]); the first leaves out files the
/// sink recorded before with the same size and time, so a restart does not offer the
/// whole folder again.
async fn scanner(
    root: Root,
    every: Option<Duration>,
    seen: mpsc::UnboundedSender<Seen>,
    sink: Arc<dyn FileSink>,
) {
    let root = Arc::new(root);
    let mut memo = PollMemory::default();
    let mut first = true;
    loop {
        let (scan_root, scan_sink) = (root.clone(), sink.clone());
        let pass = tokio::task::spawn_blocking(move || {
            let (mut files, refused) = scan_root.scan_changes(&mut memo);
            if first {
                files = unrecorded(scan_sink.as_ref(), files);
            }
            ((files, refused), memo)
        })
        .await;
        memo = match pass {
            Ok((files, memo)) => {
                send_all(&seen, root.index, files);
                first = false;
                memo
            }
            Err(error) => {
                tracing::error!(folder = %crate::logs::shown_path(&root.canonical), %error, "folder scan failed");
                PollMemory::default()
            }
        };
        let _ = seen.send(Seen::Scanned(root.index));
        match every {
            Some(pause) if !seen.is_closed() => tokio::time::sleep(pause).await,
            _ => return,
        }
    }
}

/// The files the sink has not recorded with their present size and time (all of them
/// when it cannot tell).
fn unrecorded(sink: &dyn FileSink, files: Vec<FileFound>) -> Vec<FileFound> {
    let versions: Vec<(&Path, Stamp)> = files.iter().map(|f| (f.path.as_path(), f.stamp)).collect();
    match sink.recorded(&versions) {
        Ok(known) if known.len() == files.len() => {
            let before = files.len();
            let left: Vec<FileFound> = files
                .into_iter()
                .zip(known)
                .filter_map(|(f, k)| (!k).then_some(f))
                .collect();
            tracing::info!(
                recorded = before - left.len(),
                to_offer = left.len(),
                "catch-up: files recorded before with the same size and time are not offered"
            );
            left
        }
        Ok(_) => files,
        Err(error) => {
            tracing::warn!(%error, "cannot tell which files were recorded; offering all");
            files
        }
    }
}

/// Most settled files handed to the sink in one call (one transaction).
const MOST_PER_CALL: usize = 200;

/// The one thread that calls the sink, so the database has one writer and files are
/// ingested in the order they settled. Files that settled while the sink was busy go to
/// it together ([`FileSink::ingest_files`]): a burst for one lot is stored, and the lot
/// refitted, once per call rather than once per file, so the worker keeps pace however
/// long a refit takes.
///
/// With a large-file lane ([`FileSink::large_lane_from`]), files of that size or more are
/// passed on to it as they come, and the files after them go on here meanwhile.
fn worker(
    lanes: Lanes,
    sink: Arc<dyn FileSink>,
    folders: Arc<[WatchFolder]>,
    stop: Arc<AtomicBool>,
) {
    let Lanes { jobs, large, done } = lanes;
    while let Ok(job) = jobs.recv() {
        let mut batch = vec![job];
        while batch.len() < MOST_PER_CALL {
            match jobs.try_recv() {
                Ok(job) => batch.push(job),
                Err(_) => break,
            }
        }
        if stop.load(Ordering::SeqCst) {
            break;
        }
        let batch = pass_on_large(batch, large.as_ref());
        let (files, refusals): (Vec<Job>, Vec<Job>) =
            batch.into_iter().partition(|j| j.refusal.is_none());
        let mut outcomes: Vec<Outcome> = refusals
            .into_iter()
            .map(|job| {
                let result = call_sink(&folders, job.root, || match &job.refusal {
                    Some(reason) => sink.refuse(&folders[job.root], &job.path, reason),
                    None => Ok(()),
                });
                Outcome { job, result }
            })
            .collect();
        if sink.takes_files_together() {
            outcomes.extend(ingest_jobs(sink.as_ref(), &folders, files));
        } else {
            for job in files {
                if stop.load(Ordering::SeqCst) {
                    break;
                }
                let result = call_sink(&folders, job.root, || {
                    sink.ingest(&folders[job.root], &job.path)
                });
                outcomes.push(Outcome { job, result });
            }
        }
        for outcome in outcomes {
            if done.send(outcome).is_err() {
                return;
            }
        }
    }
}

/// The ingest worker's channels: jobs in, the large-file lane (its threshold in bytes
/// and its jobs) if any, outcomes out.
struct Lanes {
    jobs: std::sync::mpsc::Receiver<Job>,
    large: Option<(u64, std::sync::mpsc::Sender<Job>)>,
    done: mpsc::UnboundedSender<Outcome>,
}

/// Send the files of `batch` at least the lane's size to the large-file lane; the rest
/// stay. A file the lane cannot take (it has ended) stays too.
fn pass_on_large(batch: Vec<Job>, large: Option<&(u64, std::sync::mpsc::Sender<Job>)>) -> Vec<Job> {
    let Some((from, lane)) = large else {
        return batch;
    };
    let mut stay = Vec::with_capacity(batch.len());
    for job in batch {
        if job.refusal.is_some() || job.stamp.size < *from {
            stay.push(job);
            continue;
        }
        if let Err(back) = lane.send(job) {
            stay.push(back.0);
        }
    }
    stay
}

/// The large-file lane: one file at a time, each in its own sink call.
fn large_worker(
    jobs: std::sync::mpsc::Receiver<Job>,
    done: mpsc::UnboundedSender<Outcome>,
    sink: Arc<dyn FileSink>,
    folders: Arc<[WatchFolder]>,
    stop: Arc<AtomicBool>,
) {
    while let Ok(job) = jobs.recv() {
        if stop.load(Ordering::SeqCst) {
            break;
        }
        let result = call_sink(&folders, job.root, || {
            sink.ingest_large(&folders[job.root], &job.path)
        });
        if done.send(Outcome { job, result }).is_err() {
            return;
        }
    }
}

/// One sink call for `files`, each with its own result (the call's error for all when it
/// fails as a whole or panics).
fn ingest_jobs(sink: &dyn FileSink, folders: &[WatchFolder], files: Vec<Job>) -> Vec<Outcome> {
    if files.is_empty() {
        return Vec::new();
    }
    let (known, unknown): (Vec<Job>, Vec<Job>) =
        files.into_iter().partition(|j| j.root < folders.len());
    let mut out: Vec<Outcome> = unknown
        .into_iter()
        .map(|job| Outcome {
            job,
            result: Err("file belongs to no configured folder".to_string()),
        })
        .collect();
    if known.is_empty() {
        return out;
    }
    let calls: Vec<(&WatchFolder, &Path)> = known
        .iter()
        .map(|j| (&folders[j.root], j.path.as_path()))
        .collect();
    let results = match catch_unwind(AssertUnwindSafe(|| sink.ingest_files(&calls))) {
        Ok(Ok(results)) if results.len() == known.len() => results
            .into_iter()
            .map(|r| r.map_err(|e| crate::logs::anyhow_once(&e)))
            .collect(),
        Ok(Ok(_)) => vec![Err("the sink gave no result for some files".to_string()); known.len()],
        Ok(Err(error)) => vec![Err(crate::logs::anyhow_once(&error)); known.len()],
        Err(_) => vec![Err("the ingestion code panicked".to_string()); known.len()],
    };
    out.extend(
        known
            .into_iter()
            .zip(results)
            .map(|(job, result)| Outcome { job, result }),
    );
    out
}

/// One sink call for a job of root `root`, its panic caught.
fn call_sink(
    folders: &[WatchFolder],
    root: usize,
    call: impl FnOnce() -> anyhow::Result<()>,
) -> Result<(), String> {
    if root >= folders.len() {
        return Err("file belongs to no configured folder".to_string());
    }
    match catch_unwind(AssertUnwindSafe(call)) {
        Ok(Ok(())) => Ok(()),
        Ok(Err(error)) => Err(crate::logs::anyhow_once(&error)),
        Err(_) => Err("the ingestion code panicked".to_string()),
    }
}

/// First wait before a version the sink refused is offered again; doubled at each further
/// refusal up to [`RETRY_MAX`] (exponential backoff, common practice). A transient failure
/// (database busy, disk full) thus heals by itself without flooding the log.
pub const RETRY_FIRST: Duration = Duration::from_secs(30);
/// Longest wait between two offers of a refused version.
pub const RETRY_MAX: Duration = Duration::from_secs(30 * 60);

/// Wait before the offer following the `attempts`-th refusal (1-based).
fn retry_delay(first: Duration, attempts: u32) -> Duration {
    let factor = 1u32 << attempts.saturating_sub(1).min(16);
    first.saturating_mul(factor).min(RETRY_MAX)
}

/// A version the sink refused.
#[derive(Debug)]
struct Refusal {
    stamp: Stamp,
    root: usize,
    path: PathBuf,
    attempts: u32,
    /// When it may be offered again; `None` while a new offer is under way.
    retry_at: Option<Instant>,
}

/// The loop's bookkeeping: files settling, files with the sink, files done in this run.
struct State {
    folders: Arc<[WatchFolder]>,
    roots: Arc<[Root]>,
    tracker: SettleTracker<PathBuf, (usize, PathBuf)>,
    /// Versions offered successfully; the same (size, mtime) is not offered again.
    offered: HashMap<PathBuf, Stamp>,
    /// Versions queued for or inside the sink.
    in_flight: HashMap<PathBuf, Stamp>,
    /// Entries reported as refused in this run, with the version and reason reported: the
    /// same is not reported twice (a poll folder's scans see it again and again).
    reported: HashMap<PathBuf, (Stamp, String)>,
    /// Versions the sink refused; held back until their retry time, so a poll folder does
    /// not offer a failing file at every scan.
    refused: HashMap<PathBuf, Refusal>,
    retry_first: Duration,
    job_tx: Option<std::sync::mpsc::Sender<Job>>,
    stats: WatchStats,
}

impl State {
    fn new(
        folders: Arc<[WatchFolder]>,
        roots: Arc<[Root]>,
        job_tx: std::sync::mpsc::Sender<Job>,
    ) -> Self {
        Self {
            folders,
            roots,
            tracker: SettleTracker::new(),
            offered: HashMap::new(),
            in_flight: HashMap::new(),
            reported: HashMap::new(),
            refused: HashMap::new(),
            retry_first: RETRY_FIRST,
            job_tx: Some(job_tx),
            stats: WatchStats::default(),
        }
    }

    /// True when this version needs no offer now: done, under way, or waiting for a retry.
    fn known(&self, key: &Path, stamp: &Stamp, now: Instant) -> bool {
        self.offered.get(key) == Some(stamp)
            || self.in_flight.get(key) == Some(stamp)
            || self
                .refused
                .get(key)
                .is_some_and(|r| r.stamp == *stamp && r.retry_at.is_some_and(|at| now < at))
    }

    /// The next moment the loop must act without being woken by a message: a settling
    /// file's re-check or a refused file's retry. `None` when idle.
    fn next_deadline(&self) -> Option<Instant> {
        let retry = self.refused.values().filter_map(|r| r.retry_at).min();
        match (self.tracker.next_deadline(), retry) {
            (Some(a), Some(b)) => Some(a.min(b)),
            (a, b) => a.or(b),
        }
    }

    fn settle_time(&self, root: usize) -> Duration {
        let ms = self.folders.get(root).map_or(0, |f| f.settle);
        Duration::from_millis(ms)
    }

    fn sighted(&mut self, sighting: Sighting) {
        let Sighting {
            root,
            found,
            signal,
        } = sighting;
        let now = Instant::now();
        if self
            .refused
            .get(&found.key)
            .is_some_and(|r| r.stamp != found.stamp)
        {
            // A new version: the old refusal and its backoff no longer apply.
            self.refused.remove(&found.key);
        }
        if self.known(&found.key, &found.stamp, now) {
            self.tracker.forget(&found.key);
            return;
        }
        let settle = self.settle_time(root);
        self.tracker.note(
            found.key,
            (root, found.path),
            found.stamp,
            signal,
            settle,
            now,
        );
    }

    /// An entry to report: handed to the worker unless this version was reported already.
    fn refused_entry(&mut self, root: usize, refused: Refused) {
        let Refused {
            path,
            reason,
            stamp,
        } = refused;
        let seen = (stamp, reason);
        if self.reported.get(&path) == Some(&seen) {
            return;
        }
        let (stamp, reason) = seen.clone();
        self.reported.insert(path.clone(), seen);
        let job = Job {
            root,
            key: path.clone(),
            path,
            stamp,
            refusal: Some(reason),
        };
        self.dispatch(job, Instant::now());
    }

    /// Puts refused files whose retry time has come back into the settle tracker, then
    /// re-checks every file whose time has come and hands the settled ones to the worker.
    fn recheck(&mut self) {
        let now = Instant::now();
        let retries: Vec<PathBuf> = self
            .refused
            .iter()
            .filter(|(_, r)| r.retry_at.is_some_and(|at| at <= now))
            .map(|(k, _)| k.clone())
            .collect();
        for key in retries {
            let Some(refusal) = self.refused.get_mut(&key) else {
                continue;
            };
            refusal.retry_at = None;
            let (root, path) = (refusal.root, refusal.path.clone());
            match self.roots.get(root).map(|r| r.examine(&path)) {
                Some(Ok(found)) if found.key == key => {
                    let settle = self.settle_time(root);
                    self.tracker
                        .note(key, (root, path), found.stamp, Signal::Seen, settle, now);
                }
                _ => {
                    tracing::debug!(path = %crate::logs::shown_path(&path), "refused file is gone; no retry");
                    self.refused.remove(&key);
                }
            }
        }
        for key in self.tracker.due(now) {
            let Some((root, path)) = self.tracker.value(&key).cloned() else {
                continue;
            };
            let stamp = self
                .roots
                .get(root)
                .and_then(|r| r.examine(&path).ok())
                .filter(|found| found.key == key)
                .map(|found| found.stamp);
            match self.tracker.confirm(&key, stamp, now) {
                Verdict::Settled((root, path), stamp) => self.dispatch(
                    Job {
                        root,
                        path,
                        key,
                        stamp,
                        refusal: None,
                    },
                    now,
                ),
                Verdict::Waiting => {
                    tracing::trace!(path = %crate::logs::shown_path(&path), "still changing")
                }
                Verdict::Gone => {
                    tracing::debug!(path = %crate::logs::shown_path(&path), "vanished before it settled");
                    self.refused.remove(&key);
                }
            }
        }
    }

    fn dispatch(&mut self, job: Job, now: Instant) {
        if self.known(&job.key, &job.stamp, now) {
            return;
        }
        let Some(job_tx) = &self.job_tx else {
            return;
        };
        self.in_flight.insert(job.key.clone(), job.stamp);
        if let Err(lost) = job_tx.send(job) {
            let job = lost.0;
            self.in_flight.remove(&job.key);
            tracing::error!(path = %crate::logs::shown_path(&job.path), "ingestion worker is gone; file not offered");
        }
    }

    fn finished(&mut self, outcome: Outcome) {
        let Outcome { job, result } = outcome;
        if self.in_flight.get(&job.key) == Some(&job.stamp) {
            self.in_flight.remove(&job.key);
        }
        self.stats.offered += 1;
        if job.refusal.is_some() {
            if let Err(error) = result {
                // Reported again at the next scan or event that sees it.
                self.stats.sink_errors += 1;
                tracing::error!(path = %crate::logs::shown_path(&job.path), error = %error.escape_debug(),
                    "refused entry not recorded");
                self.reported.remove(&job.key);
            }
            return;
        }
        let profile = self
            .folders
            .get(job.root)
            .map_or("", |f| f.profile.as_str());
        match result {
            Ok(()) => {
                tracing::debug!(path = %crate::logs::shown_path(&job.path), profile, size = job.stamp.size, "file offered");
                self.refused.remove(&job.key);
                self.offered.insert(job.key, job.stamp);
            }
            Err(error) => {
                self.stats.sink_errors += 1;
                let attempts = match self.refused.get(&job.key) {
                    Some(r) if r.stamp == job.stamp => r.attempts.saturating_add(1),
                    _ => 1,
                };
                let wait = retry_delay(self.retry_first, attempts);
                // The message may quote the file name: escape control characters so a name
                // cannot start a forged log line.
                tracing::error!(path = %crate::logs::shown_path(&job.path), profile, error = %error.escape_debug(), attempts,
                    retry_in_s = wait.as_secs(), "file not ingested");
                self.refused.insert(
                    job.key,
                    Refusal {
                        stamp: job.stamp,
                        root: job.root,
                        path: job.path,
                        attempts,
                        retry_at: Some(Instant::now() + wait),
                    },
                );
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn backoff_doubles_up_to_its_cap() {
        let first = Duration::from_secs(30);
        let waits: Vec<u64> = (1..=8).map(|n| retry_delay(first, n).as_secs()).collect();
        assert_eq!(waits, vec![30, 60, 120, 240, 480, 960, 1800, 1800]);
        assert_eq!(retry_delay(first, u32::MAX), RETRY_MAX);
    }

    /// Sleeps until the state's next deadline and lets it act, as the loop would.
    fn advance(state: &mut State) {
        let at = state.next_deadline().expect("something is pending");
        std::thread::sleep(at.saturating_duration_since(Instant::now()));
        state.recheck();
    }

    #[test]
    fn refused_file_is_held_back_then_offered_again() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join("assay-9.csv");
        std::fs::write(&file, b"Pd;1.2\n").unwrap();
        let mut folder = WatchFolder::new(dir.path(), "assay");
        folder.settle = 50;
        let folders = vec![folder];
        let roots: Arc<[Root]> = prepare(&folders).unwrap().into();
        let (job_tx, jobs) = std::sync::mpsc::channel();
        let mut state = State::new(folders.into(), roots.clone(), job_tx);
        state.retry_first = Duration::from_millis(150);
        let sight = |state: &mut State| {
            let found = roots[0]
                .examine(&roots[0].canonical.join("assay-9.csv"))
                .unwrap();
            state.sighted(Sighting {
                root: 0,
                found,
                signal: Signal::Seen,
            });
        };

        sight(&mut state);
        advance(&mut state);
        let job = jobs.try_recv().expect("offered once settled");
        state.finished(Outcome {
            job,
            result: Err("database is locked".into()),
        });
        assert_eq!(state.stats.sink_errors, 1);

        // A scan sees the same version again before its retry time: held back.
        sight(&mut state);
        assert!(state.tracker.is_empty());
        let retry_at = state.next_deadline().unwrap();
        assert!(retry_at >= Instant::now() + Duration::from_millis(100));

        // At the retry time it settles again and is offered again.
        advance(&mut state);
        assert!(jobs.try_recv().is_err(), "settles before the new offer");
        advance(&mut state);
        let job = jobs.try_recv().expect("offered again after the backoff");
        state.finished(Outcome {
            job,
            result: Ok(()),
        });
        assert_eq!(
            state.stats,
            WatchStats {
                offered: 2,
                sink_errors: 1
            }
        );
        assert_eq!(state.next_deadline(), None, "idle again: no timer");
        sight(&mut state);
        assert!(
            state.tracker.is_empty(),
            "an ingested version is not offered twice"
        );
    }

    #[test]
    fn a_changed_version_is_not_held_back() {
        let dir = tempfile::tempdir().unwrap();
        let file = dir.path().join("assay-10.csv");
        std::fs::write(&file, b"Pd;1.2\n").unwrap();
        let mut folder = WatchFolder::new(dir.path(), "assay");
        folder.settle = 50;
        let folders = vec![folder];
        let roots: Arc<[Root]> = prepare(&folders).unwrap().into();
        let (job_tx, jobs) = std::sync::mpsc::channel();
        let mut state = State::new(folders.into(), roots.clone(), job_tx);
        let path = roots[0].canonical.join("assay-10.csv");
        let found = roots[0].examine(&path).unwrap();
        state.sighted(Sighting {
            root: 0,
            found,
            signal: Signal::Closed,
        });
        advance(&mut state);
        let job = jobs.try_recv().unwrap();
        state.finished(Outcome {
            job,
            result: Err("cannot parse".into()),
        });
        // The chemist fixes the export and saves it again: a new version, offered now.
        std::fs::write(&file, b"Pd;1.25\n").unwrap();
        let found = roots[0].examine(&path).unwrap();
        state.sighted(Sighting {
            root: 0,
            found,
            signal: Signal::Closed,
        });
        advance(&mut state);
        assert_eq!(jobs.try_recv().unwrap().stamp.size, 8);
    }

    fn job(name: &str, size: u64, refusal: Option<&str>) -> Job {
        Job {
            root: 0,
            path: PathBuf::from(name),
            key: PathBuf::from(name),
            stamp: Stamp {
                size,
                modified: None,
            },
            refusal: refusal.map(str::to_string),
        }
    }

    #[test]
    fn files_from_the_lane_size_go_to_the_large_lane_in_order() {
        let (lane, large) = std::sync::mpsc::channel();
        let batch = vec![
            job("a.csv", 10, None),
            job("big-1.csv", 1 << 20, None),
            job("pipe", 1 << 21, Some("a named pipe")),
            job("b.csv", (1 << 20) - 1, None),
            job("big-2.csv", 5 << 20, None),
        ];
        let stay = pass_on_large(batch, Some(&(1 << 20, lane)));
        let names = |jobs: &[Job]| -> Vec<String> {
            jobs.iter().map(|j| j.path.display().to_string()).collect()
        };
        assert_eq!(names(&stay), ["a.csv", "pipe", "b.csv"]);
        let passed: Vec<Job> = large.try_iter().collect();
        assert_eq!(names(&passed), ["big-1.csv", "big-2.csv"]);
        // Without a lane, or with one that has ended, every file stays.
        assert_eq!(
            pass_on_large(vec![job("c.csv", 9 << 20, None)], None).len(),
            1
        );
        let (gone, ended) = std::sync::mpsc::channel();
        drop(ended);
        assert_eq!(
            names(&pass_on_large(
                vec![job("d.csv", 9 << 20, None)],
                Some(&(1, gone))
            )),
            ["d.csv"]
        );
    }
}
