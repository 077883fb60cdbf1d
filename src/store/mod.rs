//! SQLite storage: opening the database, migrations from `schema/`, and the transactions
//! that write records. Every write goes through one event of the audit chain
//! ([`crate::audit`]) in the same transaction as the rows it describes.

pub mod bulk;
pub mod central;
pub mod events;
pub mod export;
pub mod lots;
pub mod migrate;
pub mod outbox;
pub mod queries;
pub mod records;
pub mod replay;
pub mod site;
pub(crate) mod totals;
pub mod web;

use std::path::Path;

pub use rusqlite::{Connection, Transaction};

/// Errors of the storage layer.
#[derive(Debug, thiserror::Error)]
pub enum StoreError {
    #[error("database error: {0}")]
    Sqlite(#[from] rusqlite::Error),
    #[error("cannot encode or decode a stored record: {0}")]
    Json(#[from] serde_json::Error),
    #[error("migration {version} ({name}) failed: {source}")]
    Migration {
        version: i64,
        name: String,
        source: rusqlite::Error,
    },
    #[error(
        "the database is at schema version {found}, newer than this turnbook knows ({known}); use a newer turnbook"
    )]
    TooNew { found: i64, known: i64 },
    #[error("{0}")]
    Invalid(String),
    #[error("stored {0}")]
    Time(#[from] crate::model::time::BadTimestamp),
}

pub type Result<T> = std::result::Result<T, StoreError>;

/// Open (creating if needed) the database at `path`, set the pragmas turnbook relies on and
/// bring the schema up to date.
///
/// WAL lets readers (`status`, reports) run while the service writes; `synchronous=FULL`
/// makes a committed file survive power loss, which the exactly-once promise needs (a
/// backfill relaxes it per group and syncs once at its end; see `Ingestor::ingest_paths`).
pub fn open(path: &Path) -> Result<Connection> {
    // Made here with mode 0640 so that SQLite's log and shared-memory files, which take
    // the database's mode, are 0640 too. An empty file is a new database to SQLite.
    if !path.as_os_str().is_empty() && path != Path::new(":memory:") {
        crate::modes::precreate_file(path)
            .map_err(|e| StoreError::Invalid(format!("cannot create {}: {e}", path.display())))?;
    }
    let mut conn = Connection::open(path)?;
    configure(&conn)?;
    migrate::apply(&mut conn)?;
    Ok(conn)
}

/// Begin a transaction that takes the write lock at once, so a unit of work never fails
/// half-way on a lock another writer took after it read.
pub fn immediate(conn: &mut Connection) -> Result<Transaction<'_>> {
    Ok(conn.transaction_with_behavior(rusqlite::TransactionBehavior::Immediate)?)
}

/// Connect to an existing database without migrating it, for a task that only reads and
/// updates rows beside the service (the mailer).
pub fn connect(path: &Path) -> Result<Connection> {
    let conn = Connection::open(path)?;
    conn.busy_timeout(std::time::Duration::from_secs(10))?;
    Ok(conn)
}

/// Open an in-memory database with the full schema (tests and pure replays).
pub fn open_in_memory() -> Result<Connection> {
    let mut conn = Connection::open_in_memory()?;
    configure(&conn)?;
    migrate::apply(&mut conn)?;
    Ok(conn)
}

/// Process-wide SQLite settings, to be called first thing in `main`, before any thread or
/// connection exists (SQLite takes them only before it initialises, and only from a
/// process with no other thread using it).
///
/// Memory statistics off: SQLite keeps them under one process-wide lock taken on every
/// allocation, shared by a backfill's writer and readers, and turnbook reads none of them
/// (perf put that lock at about 3 % of a backfill writer's time).
pub fn configure_library() {
    // SAFETY: sqlite3_config with an int argument, as SQLITE_CONFIG_MEMSTATUS takes; the
    // caller promises no other thread uses SQLite. If SQLite has initialised already it
    // returns SQLITE_MISUSE and changes nothing.
    let rc = unsafe {
        rusqlite::ffi::sqlite3_config(
            rusqlite::ffi::SQLITE_CONFIG_MEMSTATUS,
            std::ffi::c_int::from(0_i8),
        )
    };
    if rc != rusqlite::ffi::SQLITE_OK {
        tracing::debug!(
            rc,
            "SQLite was initialised already: its memory statistics stay on"
        );
    }
}

/// Slots of a connection's lookaside memory, SQLite's own allocator for its small
/// short-lived objects (a statement's cursors, for one).
const LOOKASIDE_SLOTS: i32 = 500;
/// Bytes a slot (SQLite's default size).
const LOOKASIDE_SLOT_BYTES: i32 = 1200;

/// Give a new connection more lookaside memory than SQLite's default 40 slots, which the
/// statements turnbook keeps prepared fill: every insert then took its cursors from the
/// heap and gave them back (perf: about 4 % of a backfill writer's time; callgrind: 2 %
/// of its instructions). 600 KB a connection.
/// Call it before the connection runs anything; it is a hint, so a refusal is ignored.
pub fn more_lookaside(conn: &Connection) {
    // SAFETY: SQLITE_DBCONFIG_LOOKASIDE takes (void *buffer, int slot size, int slots);
    // a null buffer lets SQLite allocate it. The handle is this open connection's.
    let rc = unsafe {
        rusqlite::ffi::sqlite3_db_config(
            conn.handle(),
            rusqlite::ffi::SQLITE_DBCONFIG_LOOKASIDE,
            std::ptr::null_mut::<std::ffi::c_void>(),
            std::ffi::c_int::from(LOOKASIDE_SLOT_BYTES),
            std::ffi::c_int::from(LOOKASIDE_SLOTS),
        )
    };
    if rc != rusqlite::ffi::SQLITE_OK {
        tracing::debug!(rc, "SQLite kept its default lookaside memory");
    }
}

/// Page size of a new database, in bytes (an existing one keeps its own).
///
/// An event row, about 1 KB with the values of a one-line export in its payload, fits
/// three to a 4 KB page and leaves a quarter of it empty; a 16 KB page holds fifteen. With
/// SQLite's 4 KB default a backfill wrote 20 % more bytes and four times as many pages,
/// each a log frame and a checkpoint write of its own, and was about a fifth slower.
pub const PAGE_SIZE: i64 = 16384;

fn configure(conn: &Connection) -> Result<()> {
    more_lookaside(conn);
    conn.busy_timeout(std::time::Duration::from_secs(10))?;
    // Before anything is written: only a new database takes it.
    conn.pragma_update(None, "page_size", PAGE_SIZE)?;
    conn.pragma_update(None, "journal_mode", "WAL")?;
    conn.pragma_update(None, "synchronous", "FULL")?;
    conn.pragma_update(None, "foreign_keys", "ON")?;
    Ok(())
}
