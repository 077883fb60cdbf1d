//! One file from bytes to committed records: read, hash, seen?, parse through its
//! profile, store in one transaction, recompute the touched lots. This is the shell around
//! the pure parser; `ingest` and `watch` both go through it.
//!
//! Everything before the transaction is safe to repeat: a crash before commit means the
//! file is read again next time; after commit its SHA-256 marks it as seen.

use std::collections::{BTreeMap, HashMap};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicI64, AtomicUsize, Ordering};
use std::sync::{Arc, mpsc};

use serde::Serialize;
use sha2::{Digest, Sha256};

use super::error::NotebookError;
use super::heap::release_heap;
use super::listing::{Listing, RefusedEntry, collect_files};
use crate::audit;
use crate::config::Config;
use crate::ingest::{self, ParseCache, ParsedFile};
use crate::store::records::{self, FileFacts, StoredFile};
use crate::store::{self, Connection, StoreError, bulk};
use crate::watch::WatchFolder;

/// What became of one file.
#[derive(Debug, Clone, Serialize)]
#[serde(tag = "outcome", rename_all = "kebab-case")]
pub enum FileOutcome {
    Ingested {
        path: String,
        sha256: String,
        stored: StoredFile,
    },
    Duplicate {
        path: String,
        sha256: String,
        of_file_id: i64,
    },
    Rejected {
        path: String,
        sha256: Option<String>,
        error: String,
    },
}

/// Totals of a run over many files.
#[derive(Debug, Clone, Default, Serialize)]
pub struct RunSummary {
    pub ingested: usize,
    pub duplicates: usize,
    pub rejected: usize,
    pub rows_new: i64,
    pub rows_known: i64,
    pub rows_conflict: i64,
    pub conflicts: Vec<String>,
    pub errors: Vec<String>,
    /// Entries refused without being read (counted in `rejected` too): links leading out
    /// of their folder, to a folder or to nothing; named pipes, sockets, devices.
    pub entries_refused: usize,
    /// Transactions the files were stored in (a backfill's groups, or their parts).
    pub transactions: usize,
}

impl RunSummary {
    pub fn add(&mut self, o: &FileOutcome) {
        match o {
            FileOutcome::Ingested { stored, .. } => {
                self.ingested += 1;
                self.rows_new += stored.rows_new;
                self.rows_known += stored.rows_known;
                self.rows_conflict += stored.rows_conflict;
                self.conflicts.extend(stored.conflicts.iter().cloned());
            }
            FileOutcome::Duplicate { .. } => self.duplicates += 1,
            FileOutcome::Rejected { path, error, .. } => {
                self.rejected += 1;
                self.errors.push(format!("{path}: {error}"));
            }
        }
    }
}

/// Prepared statements kept per connection.
const STATEMENT_CACHE: usize = 64;
/// SQLite page cache of the writer, KiB (a negative `cache_size` is in KiB).
const PAGE_CACHE_KIB: i64 = -24 * 1024;
/// Write-ahead log size, in bytes, that triggers SQLite's own checkpoint for an
/// `Ingestor` outside a backfill's run (one-file groups through `ingest_group`).
const WAL_CHECKPOINT_BYTES: i64 = 128 << 20;
/// Log size, in bytes, at which a backfill's checkpointing thread copies the log into the
/// database (see `Ingestor::checkpoint_bytes`).
const BACKFILL_CHECKPOINT_BYTES: i64 = 64 << 20;
/// The same for the service, in pages: SQLite's default (16 MB of log at 16 KB pages).
const SERVICE_WAL_CHECKPOINT_PAGES: i64 = 1000;
/// File content a reader gathers into one part of a group (see `Ingestor::part_bytes`);
/// the rows parsed from it take a few times as much memory.
const PART_BYTES: u64 = 8 << 20;
/// Most threads reading, hashing and parsing files while the writer stores earlier ones.
const MAX_READERS: usize = 4;

/// A map keyed by SHA-256 digests in hex, which are spread uniformly already: a plain
/// multiplicative hash of them serves, in less time than SipHash (the writer records and
/// looks up every file's digest). SipHash's keyed mixing guards against keys crafted to
/// collide; here that would take someone who can write export files, and would cost at
/// most a slower group (a group holds at most `files_per_transaction` keys).
type DigestMap<V> = HashMap<String, V, std::hash::BuildHasherDefault<DigestHasher>>;

#[derive(Default)]
struct DigestHasher(u64);

impl std::hash::Hasher for DigestHasher {
    fn write(&mut self, bytes: &[u8]) {
        let mut words = bytes.chunks_exact(8);
        for w in &mut words {
            let mut word = [0u8; 8];
            word.copy_from_slice(w);
            self.mix(u64::from_le_bytes(word));
        }
        for &b in words.remainder() {
            self.mix(u64::from(b));
        }
    }

    fn finish(&self) -> u64 {
        self.0
    }
}

impl DigestHasher {
    fn mix(&mut self, word: u64) {
        self.0 = (self.0.rotate_left(5) ^ word).wrapping_mul(0x51_7c_c1_b7_27_22_0a_95);
    }
}

/// What the writer has done with, sent back to be freed by the reader that built it.
type Spent = (Leftovers, Vec<FileOutcome>);

/// What is left of stored files once the writer is done with them (see `Writer::store`).
#[derive(Default)]
struct Leftovers {
    parsed: Vec<ParsedFile>,
    facts: Vec<FileFacts>,
}

impl Leftovers {
    fn for_part(files: usize) -> Self {
        Leftovers {
            parsed: Vec::with_capacity(files),
            facts: Vec::with_capacity(files),
        }
    }
}

/// A file read and parsed, not yet stored.
struct Prepared {
    facts: FileFacts,
    result: Result<Content, String>,
}

impl Prepared {
    /// A large export, stored over transactions of its own.
    fn is_large(&self) -> bool {
        matches!(self.result, Ok(Content::Large(_)))
    }
}

/// What a readable file holds, ready to be stored.
enum Content {
    /// Its rows, all parsed.
    Rows(ParsedFile),
    /// A large cycle export, checked by a first reading: its rows are parsed again in
    /// chunks while they are stored, so that they are never all in memory.
    Large(LargeExport),
}

/// A cycle export over [`LARGE_FILE_BYTES`], as read.
struct LargeExport {
    bytes: Vec<u8>,
    profile: String,
    /// The present time its dates were checked against (the second reading uses it too).
    now: chrono::NaiveDateTime,
}

/// Cycle exports larger than this are read twice, checked and then stored in chunks of
/// [`PART_ROWS`] rows (one `file-rows` event each), rather than parsed whole: the memory a
/// file takes is then its bytes and one chunk, whatever its length.
pub(crate) const LARGE_FILE_BYTES: usize = 1 << 20;
/// Rows of a large export per `file-rows` event (about 1.5 MB of payload at 11 values a row).
const PART_ROWS: usize = 2048;

/// File versions the start-up's check of recorded files takes at a time.
const RECORDED_SLICE: usize = 8192;

/// Owns the database connection and the configuration; one per process (one writer).
pub struct Ingestor {
    conn: Connection,
    cfg: Config,
    actor: String,
    /// A profile named on the command line, for files outside every configured folder.
    pub profile_override: Option<String>,
    /// Skip, without reading it, a file whose path, size and mtime were recorded before
    /// (the service's start-up scan offers every file again; re-recording each as a
    /// duplicate at every restart would only grow the log). `ingest` keeps it off so that
    /// a second backfill reports every file as a duplicate.
    pub skip_unchanged: bool,
    /// Header layouts of the files this process has read one at a time (the service).
    parse_cache: ParseCache,
    /// File content a backfill's reader gathers before it hands part of a group to the
    /// writer (each part is one transaction): bounds the parsed rows held in memory.
    pub part_bytes: u64,
    /// Log size at which a backfill copies the log into the database. A thread of its
    /// own does the copy while the writer goes on; the writer then copies only what it
    /// appended meanwhile, so that the log starts over at its next transaction.
    pub checkpoint_bytes: i64,
    /// How a large export is stored over transactions (rows per part, stop, hook).
    pub parts: PartControl,
}

/// How a large export is stored: in chunks of `rows` rows, each chunk in a transaction of
/// its own, so that the write lock is free between them and other writers (the service's
/// lane for small files) get it; `stop` is checked between chunks (a file stopped so
/// resumes when offered again); `after_part` is called after each committed chunk.
///
/// `yield_to` counts calls of another writer in progress (the service's lane for small
/// files): before each part this writer waits while there is one, up to [`YIELD_AT_MOST`],
/// so that the other gets the lock between parts rather than by chance of SQLite's busy
/// wait, which polls at growing intervals.
pub struct PartControl {
    pub rows: usize,
    pub stop: Option<Arc<AtomicBool>>,
    pub yield_to: Option<Arc<AtomicUsize>>,
    pub after_part: Option<PartHook>,
}

/// Called after each committed part of a large export (see [`PartControl`]).
pub type PartHook = Box<dyn FnMut(&PartDone) + Send>;

impl Default for PartControl {
    fn default() -> Self {
        PartControl {
            rows: PART_ROWS,
            stop: None,
            yield_to: None,
            after_part: None,
        }
    }
}

/// Longest a large file's next part waits for another writer's call to end.
const YIELD_AT_MOST: std::time::Duration = std::time::Duration::from_millis(500);

impl PartControl {
    /// Wait, before a part, while another writer's call is in progress (at most
    /// [`YIELD_AT_MOST`]).
    fn let_others_write(&self) {
        let Some(others) = &self.yield_to else {
            return;
        };
        let start = std::time::Instant::now();
        while others.load(Ordering::SeqCst) > 0 && start.elapsed() < YIELD_AT_MOST {
            std::thread::sleep(std::time::Duration::from_millis(2));
        }
    }
}

/// One committed chunk of a large export, as told to [`PartControl::after_part`].
#[derive(Debug, Clone, PartialEq)]
pub struct PartDone {
    pub file_id: i64,
    pub chunks_done: i64,
    pub parts: i64,
}

impl Ingestor {
    pub fn open(cfg: Config) -> Result<Self, StoreError> {
        let conn = super::chain::open_writer(&cfg).map_err(|e| match e {
            NotebookError::Store(e) => e,
            e => StoreError::Invalid(e.to_string()),
        })?;
        let actor = audit::actor(cfg.actor.as_deref());
        let mut conn = conn;
        // A group writes through about a dozen distinct statements, and recomputing a lot
        // through more: keep them all prepared. A larger page cache keeps the hash indexes
        // (random order by nature) in memory during a backfill.
        //
        // Checkpoint the write-ahead log every 128 MB rather than every 1,000 pages: a page
        // changed by many groups is copied into the database once, and a checkpoint's disk
        // syncs are paid less often. Commits still sync the log (durability is unchanged);
        // the log only grows larger on disk between checkpoints.
        bulk::tune_writer(
            &mut conn,
            STATEMENT_CACHE,
            PAGE_CACHE_KIB,
            WAL_CHECKPOINT_BYTES,
        )?;
        // Heal an interrupted backfill: lots whose fit is older than their records.
        let healed = crate::notebook::recompute::recompute_stale(&mut conn, &cfg, &actor)?;
        if healed > 0 {
            tracing::info!(
                lots = healed,
                "recomputed lots whose fits were older than their records"
            );
        }
        // A large file stopped midway resumes when its content is offered again; until
        // then its stored parts stand without its closing event.
        for f in records::files_in_progress(&conn)? {
            tracing::warn!(path = %f.path.escape_debug(), file_id = f.file_id, parts = f.parts,
                "a large file was stopped midway; it resumes when offered again");
        }
        Ok(Ingestor {
            conn,
            cfg,
            actor,
            profile_override: None,
            skip_unchanged: false,
            parse_cache: ParseCache::new(),
            part_bytes: PART_BYTES,
            checkpoint_bytes: BACKFILL_CHECKPOINT_BYTES,
            parts: PartControl::default(),
        })
    }

    /// Settings for the long-running service, which ingests one file at a time: a small
    /// page cache and SQLite's default checkpoint interval keep an idle service small
    /// (the large cache only pays off in a backfill).
    pub fn tune_for_service(&mut self) -> Result<(), StoreError> {
        bulk::tune_service(&self.conn, -4096, SERVICE_WAL_CHECKPOINT_PAGES)?;
        self.skip_unchanged = true;
        Ok(())
    }

    pub fn conn(&self) -> &Connection {
        &self.conn
    }

    /// Give back the memory the last work needed: SQLite's cache, then the heap's free
    /// pages to the system (see [`release_heap`]).
    pub fn release_memory(&self) -> Result<(), StoreError> {
        bulk::shrink_memory(&self.conn)?;
        release_heap();
        Ok(())
    }

    pub fn config(&self) -> &Config {
        &self.cfg
    }

    /// True when this path, with this size and mtime, was recorded before.
    pub fn unchanged_since_recorded(&self, path: &Path) -> Result<bool, StoreError> {
        let Ok(meta) = std::fs::metadata(path) else {
            return Ok(false);
        };
        let mtime = stored_mtime(&meta);
        bulk::recorded_unchanged(
            &self.conn,
            &recorded_path(path),
            meta.len() as i64,
            mtime.as_deref(),
        )
    }

    /// For each file version (path, size, modification time), whether it was recorded
    /// before exactly so (the service's start-up scan leaves those out).
    pub fn recorded_versions(
        &self,
        files: &[(&Path, u64, Option<std::time::SystemTime>)],
    ) -> Result<Vec<bool>, StoreError> {
        // In slices: an idle service keeps the high-water mark of its memory, and the
        // start-up's listing of a decade's files is already most of it.
        let mut known = Vec::with_capacity(files.len());
        for slice in files.chunks(RECORDED_SLICE) {
            let versions: Vec<(String, i64, Option<String>)> = slice
                .iter()
                .map(|(path, size, modified)| {
                    (recorded_path(path), *size as i64, modified.map(mtime_text))
                })
                .collect();
            known.extend(bulk::recorded_among(&self.conn, &versions)?);
        }
        Ok(known)
    }

    /// Record entries that are not read (see the `listing` module) as rejected files, in one
    /// transaction: no content is read or copied into quarantine, and each raises the
    /// quarantine alert like any rejected file.
    pub fn refuse_entries(
        &mut self,
        entries: &[RefusedEntry],
    ) -> Result<Vec<FileOutcome>, StoreError> {
        if entries.is_empty() {
            return Ok(Vec::new());
        }
        let mut folders = FolderRoots::new(&self.cfg);
        let prepared = entries
            .iter()
            .map(|e| {
                let folder = folders.folder_for_plain_file(&e.path);
                let meta = std::fs::symlink_metadata(&e.path).ok();
                let facts = FileFacts {
                    path: recorded_path(&e.path),
                    sha256: String::new(),
                    size: 0,
                    mtime: meta.as_ref().and_then(stored_mtime),
                    profile: folder.map(|f| f.profile.clone()),
                    site: folder.and_then(|f| f.site.clone()),
                    seen_at: crate::model::time::now_utc(),
                };
                Prepared {
                    facts,
                    result: Err(e.reason.clone()),
                }
            })
            .collect();
        let out = Writer::new(&mut self.conn, &self.cfg, &self.actor, &mut self.parts)
            .store(prepared, None, false, &mut Leftovers::default())
            .map(|(o, _)| o)?;
        self.publish_head();
        Ok(out)
    }

    /// True when the entry at `path`, refused before, was recorded with its present time
    /// (the service's start-up scan reports every entry again).
    pub fn refused_unchanged(&self, path: &Path) -> Result<bool, StoreError> {
        let Ok(meta) = std::fs::symlink_metadata(path) else {
            return Ok(false);
        };
        bulk::recorded_unchanged(
            &self.conn,
            &recorded_path(path),
            0,
            stored_mtime(&meta).as_deref(),
        )
    }

    /// Ingest one file in its own transaction (the service's unit of work): its records,
    /// the recomputed fits and any alerts they raise commit together.
    pub fn ingest_file(&mut self, path: &Path) -> Result<FileOutcome, StoreError> {
        let mut out = self.ingest_group(&[path.to_path_buf()])?;
        self.publish_head();
        out.pop()
            .ok_or_else(|| StoreError::Invalid("no outcome for the file".into()))
    }

    /// Ingest files that arrived together in one transaction (the service, when files
    /// settle while it is busy): their records, each touched lot's refit and alerts
    /// commit together, so a burst for one lot refits it once.
    pub fn ingest_together(&mut self, paths: &[PathBuf]) -> Result<Vec<FileOutcome>, StoreError> {
        let out = self.ingest_group(paths)?;
        self.publish_head();
        Ok(out)
    }

    /// Ingest files in groups of `files_per_transaction`, calling `progress` after each file.
    ///
    /// Reading, hashing and parsing happen on reader threads, a few groups ahead of this
    /// thread, which alone writes to the database: group after group in path order, each in
    /// one transaction, exactly as if the groups were read here one after the other.
    ///
    /// The groups commit without waiting for the disk, and the last commit (or a
    /// checkpoint) syncs the log, with every group before it, before this returns. A power
    /// cut mid-run can lose only groups not yet synced, whose files are then unrecorded and
    /// read again by the next run: nothing lost, nothing twice. (WAL keeps the database
    /// whole either way; a process crash loses nothing at all.)
    ///
    /// Checkpoints: a log hook counts the log's frames after each commit (and, being the
    /// hook, stops SQLite's own checkpoints for the run; they are restored at its end).
    pub fn ingest_paths(
        &mut self,
        paths: &[PathBuf],
        mut progress: impl FnMut(&FileOutcome),
    ) -> Result<RunSummary, StoreError> {
        let mut run = RunTally::default();
        let groups: Vec<&[PathBuf]> = paths
            .chunks(self.cfg.files_per_transaction.max(1))
            .collect();
        let readers = reader_threads(groups.len());
        let reader = Reader::new(&self.cfg, self.profile_override.as_deref());
        bulk::set_full_sync(&self.conn, false)?;
        let db_path = self.cfg.database_path();
        let committed = AtomicUsize::new(0);
        let page_size = bulk::page_size(&self.conn)?;
        let checkpoint_frames = (self.checkpoint_bytes / page_size.max(512)).max(1);
        let autocheckpoint = bulk::autocheckpoint(&self.conn)?;
        let copied = AtomicBool::new(false);
        let part_bytes = self.part_bytes;
        let mut writer = Writer::new(&mut self.conn, &self.cfg, &self.actor, &mut self.parts);
        writer.version_at_start = Some(bulk::data_version(writer.conn)?);
        let start_version = writer.version_at_start;
        let log_frames = Arc::new(AtomicI64::new(0));
        bulk::count_log_frames(writer.conn, Arc::clone(&log_frames))?;
        let stored = std::thread::scope(|scope| -> Result<(), StoreError> {
            let (copy_tx, copy_rx) = mpsc::channel::<()>();
            {
                let (db_path, copied) = (&db_path, &copied);
                scope.spawn(move || checkpointer(db_path, &copy_rx, copied));
            }
            let mut log = LogCopy {
                requests: copy_tx,
                copied: &copied,
                frames: &log_frames,
                threshold: checkpoint_frames,
                copying: false,
            };
            let template = ReaderJob {
                first: 0,
                step: readers,
                groups: &groups,
                reader: &reader,
                db_path: &db_path,
                committed: &committed,
                part_bytes,
            };
            let (inbox, spent_to) = spawn_readers(scope, &template);
            for (g, group) in groups.iter().enumerate() {
                // Each part in its own transaction, in path order.
                let mut done = 0;
                while done < group.len() {
                    let (prepared, lookups) =
                        next_part(&inbox[g % readers], &reader, &group[done..]);
                    if prepared.is_empty() {
                        break; // never sent; guards the loop
                    }
                    done += prepared.len();
                    let mut left = Leftovers::for_part(prepared.len());
                    let (outcomes, lots) =
                        writer.store(prepared, lookups.as_ref(), false, &mut left)?;
                    committed.store(writer.committed, Ordering::Release);
                    log.after_commit(writer.conn)?;
                    let outcomes = run.add(outcomes, lots, &mut progress);
                    // If the reader has ended, what it would have freed is freed here.
                    let _ = spent_to[g % readers].send((left, outcomes));
                }
            }
            Ok(())
        });
        // SQLite's own checkpoints again (setting the interval installs its hook).
        bulk::restore_checkpoints(&mut self.conn, autocheckpoint)?;
        bulk::set_full_sync(&self.conn, true)?;
        stored?;
        self.recompute_touched(run.touched, start_version)?;
        self.publish_head();
        Ok(run.summary)
    }

    /// Publish the chain's head after a commit. The records are committed whatever
    /// happens here, so a witness that cannot be written is logged, not returned.
    fn publish_head(&self) {
        // The service's two writers publish in turn: one file written, then renamed.
        static PUBLISHING: std::sync::Mutex<()> = std::sync::Mutex::new(());
        let _turn = PUBLISHING.lock().unwrap_or_else(|p| p.into_inner());
        if let Err(e) = super::chain::publish_head(&self.cfg, &self.conn) {
            tracing::warn!(error = %e, "the chain's head was not published");
        }
    }

    /// A backfill recomputes each touched lot once, after its last group; this commit
    /// syncs the log. With nothing to recompute, a checkpoint syncs it instead.
    fn recompute_touched(
        &mut self,
        touched: BTreeMap<String, i64>,
        start_version: Option<i64>,
    ) -> Result<(), StoreError> {
        if touched.is_empty() {
            return bulk::checkpoint(&self.conn);
        }
        let tx = store::immediate(&mut self.conn)?;
        // With no other writer since the run began, the newest event of each lot is
        // the newest this run wrote for it, and need not be looked up.
        let known = start_version.is_some() && bulk::data_version(&tx).ok() == start_version;
        let lots = touched
            .into_iter()
            .map(|(lot, after)| (lot, known.then_some(after)))
            .collect();
        crate::notebook::recompute::recompute_backfill(&tx, &self.cfg, &lots)?;
        tx.commit()?;
        Ok(())
    }

    /// Store a group of files and recompute the lots they touched, in one transaction.
    fn ingest_group(&mut self, paths: &[PathBuf]) -> Result<Vec<FileOutcome>, StoreError> {
        let prepared = Reader::new(&self.cfg, self.profile_override.as_deref())
            .prepare_group(paths, &mut self.parse_cache);
        Writer::new(&mut self.conn, &self.cfg, &self.actor, &mut self.parts)
            .store(prepared, None, true, &mut Leftovers::default())
            .map(|(o, _)| o)
    }
}

/// A backfill's running totals: the summary and each touched lot with the newest event
/// this run wrote for it.
#[derive(Default)]
struct RunTally {
    summary: RunSummary,
    touched: BTreeMap<String, i64>,
}

impl RunTally {
    /// Count one committed part, show its outcomes, and free what the writer allocated
    /// for them; returns the outcomes to go back to their reader.
    fn add(
        &mut self,
        mut outcomes: Vec<FileOutcome>,
        lots: BTreeMap<String, i64>,
        progress: &mut impl FnMut(&FileOutcome),
    ) -> Vec<FileOutcome> {
        self.summary.transactions += 1;
        for (lot, seq) in lots {
            let newest = self.touched.entry(lot).or_insert(seq);
            *newest = (*newest).max(seq);
        }
        for o in &outcomes {
            self.summary.add(o);
            progress(o);
        }
        // What this thread allocated is freed here: a reader freeing it would take this
        // thread's allocator lock and make each side wait for the other.
        for o in &mut outcomes {
            if let FileOutcome::Ingested { stored, .. } = o {
                drop(std::mem::take(&mut stored.lots_touched));
                drop(std::mem::take(&mut stored.conflicts));
            }
        }
        outcomes
    }
}

/// The writer's side of a backfill's checkpoints: once the log passes `threshold` frames
/// the checkpointing thread is asked to copy it; when it has, the writer copies what it
/// appended meanwhile, and the log starts over at the next transaction.
struct LogCopy<'a> {
    requests: mpsc::Sender<()>,
    copied: &'a AtomicBool,
    frames: &'a AtomicI64,
    threshold: i64,
    copying: bool,
}

impl LogCopy<'_> {
    fn after_commit(&mut self, conn: &Connection) -> Result<(), StoreError> {
        if self.copying {
            if self.copied.swap(false, Ordering::AcqRel) {
                // What this thread appended while the other copied: the log is then
                // wholly in the database and starts over.
                bulk::checkpoint(conn)?;
                self.copying = false;
            }
        } else if self.frames.load(Ordering::Relaxed) >= self.threshold {
            self.copying = self.requests.send(()).is_ok();
            if !self.copying {
                bulk::checkpoint(conn)?; // the other thread has ended
            }
        }
        Ok(())
    }
}

/// Reader threads for a backfill of `groups` groups: one core is the writer's.
fn reader_threads(groups: usize) -> usize {
    std::thread::available_parallelism()
        .map_or(1, |n| n.get().saturating_sub(1))
        .clamp(1, MAX_READERS)
        .min(groups.max(1))
}

/// The next part from a reader. If the reader thread ended early (it panicked), the rest
/// of its group is read here; the panic is raised again when the scope ends.
fn next_part(
    from: &Parts,
    reader: &Reader<'_>,
    rest: &[PathBuf],
) -> (Vec<Prepared>, Option<HashLookups>) {
    from.recv()
        .unwrap_or_else(|_| (reader.prepare_group(rest, &mut ParseCache::new()), None))
}

/// The parts a reader sends the writer.
type Parts = mpsc::Receiver<(Vec<Prepared>, Option<HashLookups>)>;

/// Start `template.step` reader threads; reader r prepares groups r, r + step, ... One
/// group in flight per reader bounds the memory held. What the writer is done with goes
/// back to the reader that built it, to be freed there: memory is freed fastest by the
/// thread that allocated it, and that thread has time to spare while the writer, the
/// bottleneck, has none.
fn spawn_readers<'scope, 'env: 'scope>(
    scope: &'scope std::thread::Scope<'scope, 'env>,
    template: &ReaderJob<'env>,
) -> (Vec<Parts>, Vec<mpsc::Sender<Spent>>) {
    let mut inbox = Vec::with_capacity(template.step);
    let mut spent_to = Vec::with_capacity(template.step);
    for first in 0..template.step {
        let (tx, rx) = mpsc::sync_channel(1);
        inbox.push(rx);
        let (spent_tx, spent_rx) = mpsc::channel::<Spent>();
        spent_to.push(spent_tx);
        let job = ReaderJob { first, ..*template };
        scope.spawn(move || job.run(&tx, &spent_rx));
    }
    (inbox, spent_to)
}

/// One reader thread of a backfill: groups `first`, `first + step`, ... of `groups`.
#[derive(Clone, Copy)]
struct ReaderJob<'a> {
    first: usize,
    step: usize,
    groups: &'a [&'a [PathBuf]],
    reader: &'a Reader<'a>,
    db_path: &'a Path,
    committed: &'a AtomicUsize,
    part_bytes: u64,
}

impl ReaderJob<'_> {
    fn run(
        self,
        to_writer: &mpsc::SyncSender<(Vec<Prepared>, Option<HashLookups>)>,
        spent: &mpsc::Receiver<Spent>,
    ) {
        // Hash lookups on the reader's own connection take them off the writer; without
        // it (an error), the writer looks each hash up itself.
        let mut conn = bulk::open_for_lookups(self.db_path)
            .inspect_err(|e| tracing::debug!(error = %e, "reader looks up no hashes"))
            .ok();
        // Files of one instrument share a header row: resolve it once a thread.
        let mut cache = ParseCache::new();
        for group in self.groups.iter().skip(self.first).step_by(self.step) {
            // A group is handed over in parts of about `part_bytes` of file content, so
            // large files cannot make a group of parsed rows outgrow memory; small files
            // make one part of the whole group.
            let mut rest: &[PathBuf] = group;
            while !rest.is_empty() {
                // At most a part or two wait here: one comes back per part sent.
                while let Ok(s) = spent.try_recv() {
                    drop(s);
                }
                let prepared = self.reader.prepare_part(rest, &mut cache, self.part_bytes);
                rest = rest.get(prepared.len()..).unwrap_or_default();
                let lookups = conn.as_mut().and_then(|c| {
                    lookup_hashes(c, &prepared, self.committed)
                        .inspect_err(|e| tracing::debug!(error = %e, "hash lookups failed"))
                        .ok()
                });
                if to_writer.send((prepared, lookups)).is_err() {
                    return; // the writer stopped on an error
                }
            }
        }
    }
}

/// What a reader learnt of a group's hashes from the database, so that the writer need not
/// look each one up itself.
struct HashLookups {
    /// Transactions (groups, or parts of groups) of this run already committed when the
    /// reader's snapshot began: every file they ingested was visible to the lookups.
    visible_groups: usize,
    /// Per file of the group: the file ingested before with the same content, if any.
    found: Vec<Option<i64>>,
}

/// Look up, in one read snapshot, whether each file's content was ingested before.
/// `committed` counts the groups this run has committed; it is read before the snapshot
/// begins, so every group it counts is visible.
fn lookup_hashes(
    conn: &mut Connection,
    prepared: &[Prepared],
    committed: &AtomicUsize,
) -> Result<HashLookups, StoreError> {
    let visible_groups = committed.load(Ordering::Acquire);
    let found = bulk::ingested_with_hashes(conn, prepared.iter().map(|p| p.facts.sha256.as_str()))?;
    Ok(HashLookups {
        visible_groups,
        found,
    })
}

/// A backfill's checkpointing thread: copies the log into the database on each request,
/// on a connection of its own, while the writer goes on appending; says when it is done.
/// Without its connection it copies nothing and the writer does it all.
fn checkpointer(db_path: &Path, requests: &mpsc::Receiver<()>, done: &AtomicBool) {
    let conn = bulk::open_for_checkpoints(db_path)
        .inspect_err(|e| tracing::debug!(error = %e, "no checkpointing thread"))
        .ok();
    while requests.recv().is_ok() {
        if let Some(c) = &conn
            && let Err(e) = bulk::checkpoint(c)
        {
            tracing::debug!(error = %e, "checkpoint failed; the writer copies the log");
        }
        done.store(true, Ordering::Release);
    }
}

/// Transactions whose ingested hashes the writer keeps, for lookups made before they
/// committed (each reader is at most two parts ahead: one sent, one being prepared).
const RECENT_GROUPS: usize = 2 * MAX_READERS + 2;

/// The writing half: stores prepared groups, one transaction each.
struct Writer<'a> {
    conn: &'a mut Connection,
    cfg: &'a Config,
    actor: &'a str,
    /// Groups this writer committed.
    committed: usize,
    /// The hashes ingested by the last groups committed (oldest first), by file id.
    recent: std::collections::VecDeque<DigestMap<i64>>,
    /// `PRAGMA data_version` of this connection before the readers began: it moves only
    /// when another connection commits. If it moved, a file that other writer ingested
    /// after a reader's snapshot would be missed, so readers' lookups are not used.
    version_at_start: Option<i64>,
    /// How large exports are stored over transactions.
    parts: &'a mut PartControl,
}

impl<'a> Writer<'a> {
    fn new(
        conn: &'a mut Connection,
        cfg: &'a Config,
        actor: &'a str,
        parts: &'a mut PartControl,
    ) -> Self {
        Writer {
            conn,
            cfg,
            actor,
            committed: 0,
            recent: std::collections::VecDeque::new(),
            version_at_start: None,
            parts,
        }
    }

    /// True when a reader's lookups can be completed from the groups this writer keeps.
    fn covers(&self, l: &HashLookups, files: usize) -> bool {
        let oldest_kept = self.committed - self.recent.len();
        l.visible_groups >= oldest_kept
            && l.visible_groups <= self.committed
            && l.found.len() == files
    }

    /// Store a group of prepared files in one transaction; with `recompute`, the lots they
    /// touched are recomputed in it too (otherwise the caller does it later). Returns each
    /// file's outcome and each touched lot with the newest event the group wrote for it.
    ///
    /// `lookups`, when a reader made them, say which contents were ingested before as of
    /// its snapshot; files ingested by groups committed after that snapshot are found in
    /// the hashes this writer keeps of its recent groups. Without them (or when the
    /// snapshot is older than what is kept), each hash is looked up here.
    ///
    /// What is left of each ingested file (its parsed content and the facts not kept in
    /// its outcome) is moved into `left` rather than freed here: a backfill frees it on
    /// the reader thread that built it.
    ///
    /// A large export among them is stored over transactions of its own (see
    /// [`Writer::store_large_file`]), the files before and after it in theirs.
    fn store(
        &mut self,
        prepared: Vec<Prepared>,
        lookups: Option<&HashLookups>,
        recompute: bool,
        left: &mut Leftovers,
    ) -> Result<(Vec<FileOutcome>, BTreeMap<String, i64>), StoreError> {
        if !prepared.iter().any(Prepared::is_large) {
            return self.store_together(prepared, lookups, recompute, left);
        }
        // The reader's lookups are by place in the whole part, and other writers may
        // commit between these transactions: each hash is looked up in its transaction.
        let mut outcomes = Vec::with_capacity(prepared.len());
        let mut touched: BTreeMap<String, i64> = BTreeMap::new();
        let mut run: Vec<Prepared> = Vec::new();
        for p in prepared {
            if !p.is_large() {
                run.push(p);
                continue;
            }
            if !run.is_empty() {
                let (o, t) =
                    self.store_together(std::mem::take(&mut run), None, recompute, left)?;
                outcomes.extend(o);
                touched.extend(t);
            }
            let Prepared {
                facts,
                result: Ok(Content::Large(large)),
            } = p
            else {
                continue; // is_large said so
            };
            let (o, t) = self.store_large_file(facts, large, recompute)?;
            outcomes.push(o);
            touched.extend(t);
        }
        if !run.is_empty() {
            let (o, t) = self.store_together(run, None, recompute, left)?;
            outcomes.extend(o);
            touched.extend(t);
        }
        Ok((outcomes, touched))
    }

    /// [`Writer::store`] for files of which none is a large export: one transaction.
    fn store_together(
        &mut self,
        prepared: Vec<Prepared>,
        lookups: Option<&HashLookups>,
        recompute: bool,
        left: &mut Leftovers,
    ) -> Result<(Vec<FileOutcome>, BTreeMap<String, i64>), StoreError> {
        let lookups = lookups.filter(|l| self.covers(l, prepared.len()));
        // Copies into quarantine happen before the transaction: a crash after copying and
        // before commit leaves a spare copy, never a lost record.
        let quarantined = quarantine_rejected(&self.cfg.quarantine_dir(), &prepared);
        let tx = store::immediate(self.conn)?;
        // Only this run has written since the readers began (checked under the write lock).
        let lookups = match (lookups, self.version_at_start) {
            (Some(l), Some(v)) if bulk::data_version(&tx)? == v => Some(l),
            _ => None,
        };
        // The transaction holds the write lock: ids can be counted here, not queried.
        let mut w = records::FileWriter::new(&tx)?;
        let mut outcomes = Vec::with_capacity(prepared.len());
        let mut in_group: DigestMap<i64> =
            DigestMap::with_capacity_and_hasher(prepared.len(), Default::default());
        let mut touched: BTreeMap<String, i64> = BTreeMap::new();
        for (i, (p, q)) in prepared.into_iter().zip(quarantined).enumerate() {
            let facts = p.facts;
            let seen = match in_group.get(&facts.sha256) {
                Some(id) => Some(*id),
                None if facts.sha256.is_empty() => None,
                None => seen_before(
                    &tx,
                    (&self.recent, self.committed),
                    &facts.sha256,
                    lookups.map(|l| (l, i)),
                )?,
            };
            let outcome = match (seen, p.result) {
                (Some(of), _) => {
                    w.duplicate(&facts, of, self.actor)?;
                    FileOutcome::Duplicate {
                        path: facts.path,
                        sha256: facts.sha256,
                        of_file_id: of,
                    }
                }
                (None, Err(error)) => reject(
                    &tx,
                    &mut w,
                    (self.cfg, self.actor),
                    facts,
                    error,
                    q.as_deref(),
                )?,
                (None, Ok(Content::Rows(parsed))) => store_parsed(
                    &mut w,
                    self.actor,
                    facts,
                    parsed,
                    (&mut in_group, &mut touched),
                    left,
                )?,
                (None, Ok(Content::Large(_))) => {
                    return Err(StoreError::Invalid(format!(
                        "{}: a large export reached the one-transaction path; expected it stored in parts",
                        facts.path
                    )));
                }
            };
            outcomes.push(outcome);
        }
        w.finish()?;
        close_notices(&tx, self.cfg, &outcomes)?;
        recompute_or_list(&tx, self.cfg, &touched, recompute)?;
        tx.commit()?;
        self.committed_with(in_group);
        log_ingested(&outcomes);
        Ok((outcomes, touched))
    }

    /// Count a transaction that ingested `hashes` (the lookups of readers whose snapshot
    /// came before it find them here).
    fn committed_with(&mut self, hashes: DigestMap<i64>) {
        self.committed += 1;
        self.recent.push_back(hashes);
        if self.recent.len() > RECENT_GROUPS {
            self.recent.pop_front();
        }
    }

    /// Store a large export in transactions of its own: one that takes its id (or finds
    /// it in progress, to resume after its last stored chunk), one per chunk of rows (its
    /// `file-rows` event, provenance, cycles and progress), and one that closes it (its
    /// `file-ingested` event and row) and recomputes the lots it touched. The write lock
    /// is free between them. A content ingested before is recorded as a duplicate.
    fn store_large_file(
        &mut self,
        facts: FileFacts,
        large: LargeExport,
        recompute: bool,
    ) -> Result<(FileOutcome, BTreeMap<String, i64>), StoreError> {
        let Some(mut file) = self.open_large(&facts)? else {
            return self.duplicate_large(facts);
        };
        // The parts commit without waiting for the disk; the closing commit syncs the log
        // with every part before it. A power cut meanwhile loses only the last parts, each
        // with its progress, and the file resumes after the last part kept.
        let full = bulk::full_sync(self.conn)?;
        bulk::set_full_sync(self.conn, false)?;
        let stored = self.store_chunks(&facts, &large, &mut file);
        if full {
            bulk::set_full_sync(self.conn, true)?;
        }
        stored?;
        drop(large);
        self.parts.let_others_write();
        let tx = store::immediate(self.conn)?;
        let mut w = records::FileWriter::new(&tx)?;
        let stored = w.end_large(file, &facts, self.actor)?;
        w.finish()?;
        // A lot's newest event is its last part's (the closing event names no batch): the
        // recompute records that, so `verify` finds the fit current and compares it.
        let mut touched = BTreeMap::new();
        for lot in &stored.lots_touched {
            touched.insert(lot.clone(), store::lots::newest_seq_of(&tx, lot)?);
        }
        warn_conflicts(&facts.path, &stored.conflicts);
        let mut hashes = DigestMap::default();
        hashes.insert(facts.sha256.clone(), stored.file_id);
        let outcomes = vec![FileOutcome::Ingested {
            path: facts.path,
            sha256: facts.sha256,
            stored,
        }];
        close_notices(&tx, self.cfg, &outcomes)?;
        recompute_or_list(&tx, self.cfg, &touched, recompute)?;
        tx.commit()?;
        self.committed_with(hashes);
        log_ingested(&outcomes);
        let outcome = outcomes
            .into_iter()
            .next()
            .ok_or_else(|| StoreError::Invalid("no outcome for the large file".into()))?;
        Ok((outcome, touched))
    }

    /// The large file as stored so far: resumed when its content is in progress, begun
    /// (its id taken) otherwise; None when its content was ingested before.
    fn open_large(&mut self, facts: &FileFacts) -> Result<Option<records::LargeFile>, StoreError> {
        let tx = store::immediate(self.conn)?;
        if records::ingested_file_with_hash(&tx, &facts.sha256)?.is_some() {
            return Ok(None);
        }
        if let Some(file) = records::large_in_progress(&tx, &facts.sha256)? {
            tracing::info!(path = %facts.path.escape_debug(), file_id = file.file_id(),
                chunks_done = file.chunks_done(), "resuming a large file after its last stored part");
            return Ok(Some(file));
        }
        let mut w = records::FileWriter::new(&tx)?;
        let file = w.begin_large(facts, self.parts.rows)?;
        w.finish()?;
        tx.commit()?;
        Ok(Some(file))
    }

    /// Record a large file whose content was ingested before as a duplicate.
    fn duplicate_large(
        &mut self,
        facts: FileFacts,
    ) -> Result<(FileOutcome, BTreeMap<String, i64>), StoreError> {
        let tx = store::immediate(self.conn)?;
        let of = records::ingested_file_with_hash(&tx, &facts.sha256)?
            .ok_or_else(|| StoreError::Invalid("the earlier copy vanished".into()))?;
        let mut w = records::FileWriter::new(&tx)?;
        w.duplicate(&facts, of, self.actor)?;
        w.finish()?;
        tx.commit()?;
        self.committed_with(DigestMap::default());
        Ok((
            FileOutcome::Duplicate {
                path: facts.path,
                sha256: facts.sha256,
                of_file_id: of,
            },
            BTreeMap::new(),
        ))
    }

    /// Read the large file again in its chunks and store each one not yet stored in a
    /// transaction of its own; stop between chunks when asked.
    fn store_chunks(
        &mut self,
        facts: &FileFacts,
        large: &LargeExport,
        file: &mut records::LargeFile,
    ) -> Result<(), StoreError> {
        let profile = self.cfg.profiles.get(&large.profile).ok_or_else(|| {
            StoreError::Invalid(format!("no export profile named '{}'", large.profile))
        })?;
        let mut cache = ParseCache::new();
        cache.set_now(large.now);
        let skip = file.chunks_done();
        let mut chunk = 0i64;
        let (conn, actor, parts) = (&mut *self.conn, self.actor, &mut *self.parts);
        let read = cache.parse_in_chunks(&large.bytes, profile, file.chunk_rows(), |rows| {
            chunk += 1;
            if chunk <= skip {
                return Ok(()); // stored before the file was stopped
            }
            if parts.stop.as_ref().is_some_and(|s| s.load(Ordering::SeqCst)) {
                return Err(StoreError::Invalid(format!(
                    "{}: stopped after {} of its chunks; the rest is stored when it is offered again",
                    facts.path,
                    chunk - 1
                )));
            }
            let ParsedFile::Cycles(rows) = rows else {
                return Err(StoreError::Invalid(
                    "a lot sheet read as a cycle export".into(),
                ));
            };
            parts.let_others_write();
            let tx = store::immediate(conn)?;
            let mut w = records::FileWriter::new(&tx)?;
            w.large_part(file, facts, &rows, actor)?;
            w.finish()?;
            tx.commit()?;
            if let Some(hook) = parts.after_part.as_mut() {
                hook(&PartDone {
                    file_id: file.file_id(),
                    chunks_done: file.chunks_done(),
                    parts: file.parts(),
                });
            }
            Ok(())
        });
        match read {
            Ok(_) => Ok(()),
            Err(ingest::Chunked::Sink(e)) => Err(e),
            // The first reading found no fault: the same bytes through the same profile and
            // time cannot have one now.
            Err(ingest::Chunked::Parse(e)) => Err(StoreError::Invalid(format!(
                "{}: a second reading differs from the first: {e}",
                facts.path
            ))),
        }
    }
}

/// Recompute the lots a group touched in its transaction, or (a backfill's group, whose
/// lots are recomputed after its last group) list them in it: a crash before the closing
/// recompute leaves the list for the next open, which need look at nothing else.
fn recompute_or_list(
    tx: &store::Transaction<'_>,
    cfg: &Config,
    touched: &BTreeMap<String, i64>,
    recompute: bool,
) -> Result<(), StoreError> {
    if recompute {
        // Under the write lock, this group's events are the newest of their lots.
        let lots = touched.iter().map(|(l, a)| (l.clone(), Some(*a))).collect();
        crate::notebook::recompute::recompute_backfill(tx, cfg, &lots)
    } else {
        store::lots::mark_to_recompute(tx, touched.keys().map(String::as_str))
    }
}

/// Close the file notices of the files this group ingested (repaired re-exports).
fn close_notices(
    tx: &store::Transaction<'_>,
    cfg: &Config,
    outcomes: &[FileOutcome],
) -> Result<usize, StoreError> {
    let ingested: Vec<&str> = outcomes
        .iter()
        .filter_map(|o| match o {
            FileOutcome::Ingested { path, .. } => Some(path.as_str()),
            _ => None,
        })
        .collect();
    crate::notebook::alerts::close_file_notices(tx, cfg, &ingested)
}

/// Record a file that could not be read, and raise its quarantine alert.
fn reject(
    tx: &store::Transaction<'_>,
    w: &mut records::FileWriter<'_, '_>,
    (cfg, actor): (&Config, &str),
    facts: FileFacts,
    error: String,
    quarantined: Option<&str>,
) -> Result<FileOutcome, StoreError> {
    w.rejected(&facts, &error, quarantined, actor)?;
    crate::notebook::alerts::raise_quarantine(tx, cfg, facts.site.as_deref(), &facts.path, &error)?;
    // A file name or a quoted cell may hold control characters: escape them so that a
    // log read on a terminal shows them instead of obeying them.
    tracing::info!(path = %facts.path.escape_debug(), error = %error.escape_debug(), "file rejected");
    Ok(FileOutcome::Rejected {
        sha256: (!facts.sha256.is_empty()).then(|| facts.sha256.clone()),
        path: facts.path,
        error,
    })
}

/// The file ingested before with this content: from the reader's lookup `(l, i)` and
/// the groups committed after its snapshot, else looked up here.
fn seen_before(
    tx: &store::Transaction<'_>,
    (recent, committed): (&std::collections::VecDeque<DigestMap<i64>>, usize),
    sha256: &str,
    lookup: Option<(&HashLookups, usize)>,
) -> Result<Option<i64>, StoreError> {
    let Some((l, i)) = lookup else {
        return records::ingested_file_with_hash(tx, sha256);
    };
    let oldest_kept = committed - recent.len();
    Ok(l.found[i].or_else(|| {
        recent
            .iter()
            .skip(l.visible_groups - oldest_kept)
            .find_map(|g| g.get(sha256).copied())
    }))
}

/// Store a parsed file's records; it is now this group's copy of its content.
fn store_parsed(
    w: &mut records::FileWriter<'_, '_>,
    actor: &str,
    mut facts: FileFacts,
    parsed: ParsedFile,
    (in_group, touched): (&mut DigestMap<i64>, &mut BTreeMap<String, i64>),
    left: &mut Leftovers,
) -> Result<FileOutcome, StoreError> {
    let stored = w.parsed(&facts, &parsed, actor)?;
    // Files are stored in order: this one's event is the lots' newest.
    for lot in &stored.lots_touched {
        touched.insert(lot.clone(), stored.event_seq);
    }
    warn_conflicts(&facts.path, &stored.conflicts);
    in_group.insert(facts.sha256.clone(), stored.file_id);
    left.parsed.push(parsed);
    let outcome = FileOutcome::Ingested {
        path: std::mem::take(&mut facts.path),
        sha256: std::mem::take(&mut facts.sha256),
        stored,
    };
    left.facts.push(facts);
    Ok(outcome)
}

/// A warning per conflicting value a file brought.
fn warn_conflicts(path: &str, conflicts: &[String]) {
    for c in conflicts {
        tracing::warn!(path = %path.escape_debug(), conflict = %c.escape_debug(), "conflicting value kept and flagged");
    }
}

/// One log line per ingested file, when info is logged.
fn log_ingested(outcomes: &[FileOutcome]) {
    if tracing::enabled!(tracing::Level::INFO) {
        for o in outcomes {
            if let FileOutcome::Ingested { path, stored, .. } = o {
                tracing::info!(path = %path.escape_debug(), rows_new = stored.rows_new, rows_known = stored.rows_known,
                    rows_conflict = stored.rows_conflict, "file ingested");
            }
        }
    }
}

/// The reading half: read, hash and parse files; shared by the reader threads.
struct Reader<'a> {
    cfg: &'a Config,
    profile_override: Option<&'a str>,
    /// The present time of the run, which bounds the plausible dates of an export.
    now: chrono::NaiveDateTime,
}

impl<'a> Reader<'a> {
    /// A reader for a run that starts now: the present time bounds the plausible dates.
    fn new(cfg: &'a Config, profile_override: Option<&'a str>) -> Self {
        Reader {
            cfg,
            profile_override,
            now: chrono::Utc::now().naive_utc(),
        }
    }

    fn prepare_group(&self, paths: &[PathBuf], cache: &mut ParseCache) -> Vec<Prepared> {
        self.prepare_part(paths, cache, u64::MAX)
    }

    /// Prepare the first files of `paths`, stopping after the one whose content brings the
    /// total to `budget` bytes (at least one file; all of them for small files).
    fn prepare_part(
        &self,
        paths: &[PathBuf],
        cache: &mut ParseCache,
        budget: u64,
    ) -> Vec<Prepared> {
        let mut folders = FolderRoots::new(self.cfg);
        // Each profile is checked once a group, not once a file.
        let valid: HashMap<&str, Result<(), String>> = self
            .cfg
            .profiles
            .iter()
            .map(|(name, p)| (name.as_str(), p.validate()))
            .collect();
        let mut part = Vec::with_capacity(paths.len());
        let mut bytes = 0u64;
        for p in paths {
            let prepared = self.prepare(p, &mut folders, &valid, cache);
            bytes = bytes.saturating_add(u64::try_from(prepared.facts.size).unwrap_or(0));
            part.push(prepared);
            if bytes >= budget {
                break;
            }
        }
        part
    }

    /// Read, hash and parse one file. Never fails: a problem becomes a rejection.
    fn prepare(
        &self,
        path: &Path,
        folders: &mut FolderRoots<'_>,
        valid: &HashMap<&str, Result<(), String>>,
        cache: &mut ParseCache,
    ) -> Prepared {
        let display = recorded_path(path);
        let mut facts = FileFacts {
            path: display.clone(),
            sha256: String::new(),
            size: 0,
            mtime: None,
            profile: None,
            site: None,
            seen_at: crate::model::time::now_utc(),
        };
        // One open, without following a symbolic link: a plain file is judged by its own
        // place; a link (the open refuses it) is followed and judged by its target's folder.
        // The size and time come from the open file, so nothing looks the path up twice.
        let (file, linked) = match open_unfollowed(path) {
            Err(e) if e.raw_os_error() == Some(libc::ELOOP) => (std::fs::File::open(path), true),
            other => (other, false),
        };
        let folder: Option<&WatchFolder> = if linked || file.is_err() {
            folders.folder_for(path)
        } else {
            folders.folder_for_plain_file(path)
        };
        facts.site = folder.and_then(|f| f.site.clone());
        let profile_name = self
            .profile_override
            .map(str::to_string)
            .or_else(|| folder.map(|f| f.profile.clone()));
        facts.profile = profile_name.clone();
        let (file, meta) = match file.and_then(|f| f.metadata().map(|m| (f, m))) {
            Ok(fm) => fm,
            Err(e) => {
                return Prepared {
                    facts,
                    result: Err(format!("cannot read the file: {e}")),
                };
            }
        };
        if let Some(why) = not_a_regular_file(&meta) {
            return Prepared {
                facts,
                result: Err(why),
            };
        }
        facts.size = i64::try_from(meta.len()).unwrap_or(i64::MAX);
        facts.mtime = stored_mtime(&meta);
        if meta.len() > self.cfg.max_file_bytes {
            // Hash it anyway (streaming) so the record names exactly which content was refused.
            facts.sha256 = sha256_file(path).unwrap_or_default();
            return Prepared {
                facts,
                result: Err(format!(
                    "the file is {} bytes, more than max_file_bytes ({}); expected a small export",
                    meta.len(),
                    self.cfg.max_file_bytes
                )),
            };
        }
        let bytes = match read_sized(&file, meta.len()) {
            Ok(b) => b,
            Err(e) => {
                return Prepared {
                    facts,
                    result: Err(format!("cannot read the file: {e}")),
                };
            }
        };
        facts.size = bytes.len() as i64;
        facts.sha256 = crate::model::chain::hex_lower(&Sha256::digest(&bytes));
        let result = if bytes.len() > LARGE_FILE_BYTES && !ingest::is_spreadsheet(&bytes) {
            self.check_large(profile_name.as_deref(), bytes, valid, cache)
        } else {
            self.parse(profile_name.as_deref(), &bytes, valid, cache)
                .map(Content::Rows)
        };
        Prepared { facts, result }
    }

    /// A large file: a cycle export through a valid profile is read once to check it,
    /// its rows dropped chunk by chunk, and kept as bytes to be stored in chunks; any
    /// other file is parsed whole.
    fn check_large(
        &self,
        profile_name: Option<&str>,
        bytes: Vec<u8>,
        valid: &HashMap<&str, Result<(), String>>,
        cache: &mut ParseCache,
    ) -> Result<Content, String> {
        let name = profile_name.unwrap_or_default();
        let Some(profile) =
            self.cfg.profiles.get(name).filter(|p| {
                p.kind == ingest::ProfileKind::Cycles && valid.get(name) == Some(&Ok(()))
            })
        else {
            return self
                .parse(profile_name, &bytes, valid, cache)
                .map(Content::Rows);
        };
        cache.set_now(self.now);
        let checked = cache.parse_in_chunks(&bytes, profile, PART_ROWS, |rows| {
            drop(rows);
            Ok::<(), std::convert::Infallible>(())
        });
        match checked {
            Ok(_) => Ok(Content::Large(LargeExport {
                bytes,
                profile: name.to_string(),
                now: self.now,
            })),
            Err(ingest::Chunked::Parse(e)) => Err(e.to_string()),
            Err(ingest::Chunked::Sink(never)) => match never {},
        }
    }

    /// Parse a file's bytes with the profile its folder (or the command line) names.
    fn parse(
        &self,
        profile_name: Option<&str>,
        bytes: &[u8],
        valid: &HashMap<&str, Result<(), String>>,
        cache: &mut ParseCache,
    ) -> Result<ParsedFile, String> {
        let Some(name) = profile_name else {
            return Err(
                "the file is not under any configured folder, so no export profile applies; \
                 expected a path below one of [[folders]] (or give --profile)"
                    .to_string(),
            );
        };
        match (self.cfg.profiles.get(name), valid.get(name)) {
            (Some(profile), Some(Ok(()))) => {
                cache.set_now(self.now);
                cache.parse_valid(bytes, profile).map_err(|e| e.to_string())
            }
            // An invalid profile: the parser names what is wrong with it.
            (Some(profile), _) => ingest::parse(bytes, profile).map_err(|e| e.to_string()),
            (None, _) => Err(format!("no export profile named '{name}'")),
        }
    }
}

/// The configured folders with their roots resolved once (per group), for
/// [`Config::folder_for`]'s longest-prefix choice without resolving every root per file,
/// and the last resolved parent folder (a backfill's files come sorted, folder by folder).
struct FolderRoots<'a> {
    roots: Vec<(PathBuf, usize, &'a WatchFolder)>,
    last_parent: Option<(PathBuf, PathBuf)>,
}

impl<'a> FolderRoots<'a> {
    fn new(cfg: &'a Config) -> Self {
        let roots = cfg
            .folders
            .iter()
            .map(|f| {
                let root = cfg.resolve(&f.path);
                let root = std::fs::canonicalize(&root).unwrap_or(root);
                (root.components().count(), root, f)
            })
            .map(|(n, root, f)| (root, n, f))
            .collect();
        FolderRoots {
            roots,
            last_parent: None,
        }
    }

    /// The folder of any path, resolving every link in it.
    fn folder_for(&self, file: &Path) -> Option<&'a WatchFolder> {
        let file = std::fs::canonicalize(file).unwrap_or_else(|_| file.to_path_buf());
        self.longest_root(&file)
    }

    /// The folder of a file that is not itself a link: only its parent needs resolving, and
    /// the parent of the previous file is remembered.
    fn folder_for_plain_file(&mut self, file: &Path) -> Option<&'a WatchFolder> {
        let (Some(parent), Some(name)) = (file.parent(), file.file_name()) else {
            return self.folder_for(file);
        };
        let resolved = match &self.last_parent {
            Some((p, r)) if p == parent => r.join(name),
            _ => {
                let r = std::fs::canonicalize(parent).unwrap_or_else(|_| parent.to_path_buf());
                let joined = r.join(name);
                self.last_parent = Some((parent.to_path_buf(), r));
                joined
            }
        };
        self.longest_root(&resolved)
    }

    fn longest_root(&self, file: &Path) -> Option<&'a WatchFolder> {
        self.roots
            .iter()
            .filter(|(root, _, _)| file.starts_with(root))
            .max_by_key(|(_, n, _)| *n)
            .map(|(_, _, f)| *f)
    }
}

/// Open a file for reading without following a symbolic link (the open fails with ELOOP
/// on one) and without waiting for a writer should the path be a named pipe (a read then
/// finds it empty).
fn open_unfollowed(path: &Path) -> std::io::Result<std::fs::File> {
    use std::os::unix::fs::OpenOptionsExt;
    std::fs::OpenOptions::new()
        .read(true)
        .custom_flags(libc::O_NOFOLLOW | libc::O_NONBLOCK)
        .open(path)
}

/// Why a file that is not a regular file (a named pipe, a socket, a device) is not read.
fn not_a_regular_file(meta: &std::fs::Metadata) -> Option<String> {
    (!meta.is_file()).then(|| {
        let kind = crate::watch::entry_kind(&meta.file_type());
        format!("cannot read the file: it is {kind}, not a regular file; expected an export file")
    })
}

/// Read the whole of an open file whose size is known from its metadata. `File`'s own
/// `read_to_end` asks the size and the position again (two system calls per file).
fn read_sized(file: &std::fs::File, size: u64) -> std::io::Result<Vec<u8>> {
    use std::io::Read;
    let mut buf = Vec::with_capacity(usize::try_from(size).unwrap_or(0).saturating_add(1));
    file.take(u64::MAX).read_to_end(&mut buf)?;
    Ok(buf)
}

fn sha256_file(path: &Path) -> std::io::Result<String> {
    let mut f = std::fs::File::open(path)?;
    let mut h = Sha256::new();
    let mut buf = vec![0u8; 1 << 16];
    loop {
        let n = std::io::Read::read(&mut f, &mut buf)?;
        if n == 0 {
            break;
        }
        h.update(&buf[..n]);
    }
    Ok(hex::encode(h.finalize()))
}

/// A file's modification time as stored.
fn stored_mtime(meta: &std::fs::Metadata) -> Option<String> {
    meta.modified().ok().map(mtime_text)
}

/// A modification time as `source_files.mtime` stores it.
fn mtime_text(t: std::time::SystemTime) -> String {
    crate::model::time::format_ts(chrono::DateTime::<chrono::Utc>::from(t))
}

/// Copy each file that could not be read into quarantine; its copy's name, per file.
fn quarantine_rejected(dir: &Path, prepared: &[Prepared]) -> Vec<Option<String>> {
    prepared
        .iter()
        .map(|p| match &p.result {
            Err(_) => quarantine_copy(dir, &p.facts),
            Ok(_) => None,
        })
        .collect()
}

/// Copy a rejected file into the quarantine folder as `<sha256 prefix>-<safe name>`.
fn quarantine_copy(dir: &Path, facts: &FileFacts) -> Option<String> {
    let src = Path::new(&facts.path);
    let name: String = src
        .file_name()
        .map(|n| n.to_string_lossy().into_owned())
        .unwrap_or_else(|| "file".into())
        .chars()
        .map(|c| {
            if c.is_alphanumeric() || ".-_".contains(c) {
                c
            } else {
                '_'
            }
        })
        .take(120)
        .collect();
    // Only content that was read and hashed is kept: an entry refused unread (a link
    // leading out of its folder, a named pipe) has nothing to keep, and following such a
    // link would copy a file from elsewhere.
    if facts.sha256.is_empty() || !std::fs::metadata(src).is_ok_and(|m| m.is_file()) {
        return None;
    }
    let prefix = facts.sha256.get(..12).unwrap_or("unhashed");
    let dest = dir.join(format!("{prefix}-{name}"));
    if let Err(e) = crate::modes::create_dirs(dir) {
        tracing::error!(dir = %crate::logs::shown_path(dir), error = %e, "cannot create the quarantine folder");
        return None;
    }
    // A copy takes its source's mode; a quarantined copy is the service's, mode 0640.
    match std::fs::copy(src, &dest).and_then(|_| crate::modes::restrict_file(&dest)) {
        Ok(()) => Some(dest.display().to_string()),
        Err(e) => {
            tracing::warn!(path = %facts.path.escape_debug(), error = %e, "cannot copy the file into quarantine");
            None
        }
    }
}

/// The id of the newest file record (0 when none), to see later which files landed.
pub fn newest_file_id(cfg: &Config) -> Result<i64, NotebookError> {
    Ok(store::queries::newest_file_id(&store::open(
        &cfg.database_path(),
    )?)?)
}

/// Files recorded after file id `after`, oldest first.
pub fn files_recorded_after(
    cfg: &Config,
    after: i64,
) -> Result<Vec<store::queries::FileRecorded>, NotebookError> {
    Ok(store::queries::files_after(
        &store::open(&cfg.database_path())?,
        after,
    )?)
}

/// Every entry a backfill of `paths` accounts for (files to read, entries refused), after
/// checking the profile asked for exists.
pub fn files_under(
    cfg: &Config,
    paths: &[PathBuf],
    profile: Option<&str>,
) -> Result<Listing, NotebookError> {
    if let Some(p) = profile
        && !cfg.profiles.contains_key(p)
    {
        return Err(NotebookError::Usage(format!(
            "--profile '{p}' is not defined; expected one of: {}",
            cfg.profiles.keys().cloned().collect::<Vec<_>>().join(", ")
        )));
    }
    let mut files = Listing::default();
    for p in paths {
        collect_files(p, &mut files)
            .map_err(|e| NotebookError::Usage(format!("cannot read {}: {e}", p.display())))?;
    }
    Ok(files)
}

/// Ingest `listing` as one backfill, reading every file with `profile` when given and
/// recording each refused entry as rejected; `each` sees every outcome as it is committed.
pub fn ingest_files(
    cfg: Config,
    listing: &Listing,
    profile: Option<String>,
    mut each: impl FnMut(&FileOutcome),
) -> Result<RunSummary, NotebookError> {
    let mut ing = Ingestor::open(cfg)?;
    ing.profile_override = profile;
    let refused = ing.refuse_entries(&listing.refused)?;
    for o in &refused {
        each(o);
    }
    let mut summary = ing.ingest_paths(&listing.files, &mut each)?;
    summary.entries_refused = refused.len();
    if !refused.is_empty() {
        summary.transactions += 1;
    }
    // The refused entries come first in the totals, as they came first in the run.
    let mut first = RunSummary::default();
    for o in &refused {
        first.add(o);
    }
    summary.rejected += first.rejected;
    first.errors.append(&mut summary.errors);
    summary.errors = first.errors;
    Ok(summary)
}

/// The path as recorded: absolute (symbolic links kept), so a file reached through a
/// relative backfill argument and through the watcher is recorded under one name.
pub fn recorded_path(path: &Path) -> String {
    std::path::absolute(path)
        .unwrap_or_else(|_| path.to_path_buf())
        .display()
        .to_string()
}
