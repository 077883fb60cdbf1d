//! Numbered SQL migrations from `schema/`, embedded at build time and applied at start-up,
//! each in its own transaction with its version recorded.

use rusqlite::Connection;

use super::{Result, StoreError};

/// (version, name, SQL). Add a migration by adding a file `schema/NNNN_name.sql` and a
/// line here; never edit a migration that has shipped.
pub const MIGRATIONS: &[(i64, &str, &str)] = &[
    (1, "core", include_str!("../../schema/0001_core.sql")),
    (2, "fits", include_str!("../../schema/0002_fits.sql")),
    (3, "outbox", include_str!("../../schema/0003_outbox.sql")),
    (4, "indexes", include_str!("../../schema/0004_indexes.sql")),
    (
        5,
        "lean_records",
        include_str!("../../schema/0005_lean_records.sql"),
    ),
    (
        6,
        "outcome_check",
        include_str!("../../schema/0006_outcome_check.sql"),
    ),
    (
        7,
        "chain_key",
        include_str!("../../schema/0007_chain_key.sql"),
    ),
    (
        8,
        "lot_water",
        include_str!("../../schema/0008_lot_water.sql"),
    ),
    (
        9,
        "lot_family",
        include_str!("../../schema/0009_lot_family.sql"),
    ),
    (
        10,
        "alert_eased",
        include_str!("../../schema/0010_alert_eased.sql"),
    ),
    (
        11,
        "fit_config",
        include_str!("../../schema/0011_fit_config.sql"),
    ),
    (
        12,
        "outbox_chain",
        include_str!("../../schema/0012_outbox_chain.sql"),
    ),
    (
        13,
        "lot_states",
        include_str!("../../schema/0013_lot_states.sql"),
    ),
    (
        14,
        "plain_sqlite_and_figures",
        include_str!("../../schema/0014_plain_sqlite_and_figures.sql"),
    ),
    (
        15,
        "large_exports",
        include_str!("../../schema/0015_large_exports.sql"),
    ),
    (
        16,
        "conflict_index",
        include_str!("../../schema/0016_conflict_index.sql"),
    ),
    (
        17,
        "lot_snapshots",
        include_str!("../../schema/0017_lot_snapshots.sql"),
    ),
    (
        18,
        "printed_lines",
        include_str!("../../schema/0018_printed_lines.sql"),
    ),
    (
        19,
        "files_in_progress",
        include_str!("../../schema/0019_files_in_progress.sql"),
    ),
    (
        20,
        "kept_counts",
        include_str!("../../schema/0020_kept_counts.sql"),
    ),
];

/// The newest schema version this build knows.
pub fn latest() -> i64 {
    MIGRATIONS.last().map(|m| m.0).unwrap_or(0)
}

/// Apply every migration newer than the database's recorded version.
pub fn apply(conn: &mut Connection) -> Result<()> {
    conn.execute_batch(
        "CREATE TABLE IF NOT EXISTS schema_migrations (
             version INTEGER PRIMARY KEY,
             name TEXT NOT NULL,
             applied_at TEXT NOT NULL
         ) STRICT;",
    )?;
    let current: i64 = conn.query_row(
        "SELECT COALESCE(MAX(version), 0) FROM schema_migrations",
        [],
        |r| r.get(0),
    )?;
    if current > latest() {
        return Err(StoreError::TooNew {
            found: current,
            known: latest(),
        });
    }
    if current == latest() {
        return Ok(());
    }
    // A migration may rebuild a table that others reference (SQLite's documented way to
    // change a constraint): foreign keys are off while migrations run, which can only be
    // switched outside a transaction, and each migration checks them before it commits.
    let fk_on: bool = conn.query_row("PRAGMA foreign_keys", [], |r| r.get(0))?;
    conn.pragma_update(None, "foreign_keys", "OFF")?;
    let applied = apply_from(conn, current);
    if fk_on {
        conn.pragma_update(None, "foreign_keys", "ON")?;
    }
    applied
}

fn apply_from(conn: &mut Connection, current: i64) -> Result<()> {
    for &(version, name, sql) in MIGRATIONS.iter().filter(|m| m.0 > current) {
        let failed = |source| StoreError::Migration {
            version,
            name: name.to_string(),
            source,
        };
        let tx = conn.transaction()?;
        tx.execute_batch(sql).map_err(failed)?;
        let orphans: i64 = tx
            .query_row("SELECT COUNT(*) FROM pragma_foreign_key_check", [], |r| {
                r.get(0)
            })
            .map_err(failed)?;
        if orphans > 0 {
            return Err(StoreError::Invalid(format!(
                "migration {version} ({name}) would leave {orphans} rows referring to missing rows; nothing was changed"
            )));
        }
        tx.execute(
            "INSERT INTO schema_migrations(version, name, applied_at) VALUES (?1, ?2, ?3)",
            rusqlite::params![version, name, crate::model::time::now_utc()],
        )?;
        tx.commit()?;
        tracing::info!(version, name, "schema migration applied");
    }
    Ok(())
}
