//! `store::configure_library` turns SQLite's memory statistics off when called before the
//! first connection, as `main` does. (A file of its own: one test, one process, nothing
//! else using SQLite when it runs.)

use turnbook::store;

#[test]
fn memory_statistics_are_off_after_the_library_is_configured() {
    store::configure_library();
    let dir = tempfile::tempdir().unwrap();
    let conn = store::open(&dir.path().join("t.db")).unwrap();
    let n: i64 = conn
        .query_row("SELECT COUNT(*) FROM sqlite_schema", [], |r| r.get(0))
        .unwrap();
    assert!(n > 0);
    // SAFETY: a plain query of a process-wide counter.
    let used = unsafe { rusqlite::ffi::sqlite3_memory_used() };
    assert_eq!(used, 0, "SQLite still counts its memory");
    // Called again once SQLite runs: refused by SQLite, without harm.
    store::configure_library();
}
