//! The modes of what turnbook writes: records, quarantined copies, mails and the chain's
//! witness are for the service's user and its group (0640), folders likewise (0750), the
//! chain's key for the user alone (0600, in `audit::key`).
//!
//! The `turnbook` binary also sets its umask to 0027 first thing, which covers what other
//! code creates (SQLite's own files, reports); the functions here give the mode whatever
//! the umask, for the places where the mode would otherwise come from elsewhere (a copy
//! keeps its source's mode) or where the library is used without the binary.

use std::io::Write;
use std::os::unix::fs::{DirBuilderExt, OpenOptionsExt, PermissionsExt};
use std::path::Path;

/// Mode of the files turnbook writes.
pub const FILE_MODE: u32 = 0o640;
/// Mode of the folders turnbook creates.
pub const DIR_MODE: u32 = 0o750;
/// The umask the binary runs with: nothing for others, no writing for the group.
pub const UMASK: u32 = 0o027;

/// Create `dir` and any missing parents with mode 0750 (folders that exist keep theirs).
pub fn create_dirs(dir: &Path) -> std::io::Result<()> {
    if dir.is_dir() {
        return Ok(());
    }
    std::fs::DirBuilder::new()
        .recursive(true)
        .mode(DIR_MODE)
        .create(dir)?;
    // A permissive umask cannot widen a mode, but a stricter one narrows it: set it.
    std::fs::set_permissions(dir, std::fs::Permissions::from_mode(DIR_MODE))
}

/// Write `bytes` to a new or truncated file at `path` with mode 0640, synced.
pub fn write_file(path: &Path, bytes: &[u8]) -> std::io::Result<()> {
    let mut f = std::fs::OpenOptions::new()
        .write(true)
        .create(true)
        .truncate(true)
        .mode(FILE_MODE)
        .open(path)?;
    f.set_permissions(std::fs::Permissions::from_mode(FILE_MODE))?;
    f.write_all(bytes)?;
    f.sync_all()
}

/// Set a file turnbook created by other means (a copy) to mode 0640.
pub fn restrict_file(path: &Path) -> std::io::Result<()> {
    std::fs::set_permissions(path, std::fs::Permissions::from_mode(FILE_MODE))
}

/// Create an empty database file with mode 0640 (and its folder, 0750) unless one exists,
/// so that SQLite, which gives its log and shared-memory files the database's mode, makes
/// them 0640 too.
pub fn precreate_file(path: &Path) -> std::io::Result<()> {
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        create_dirs(dir)?;
    }
    match std::fs::OpenOptions::new()
        .write(true)
        .create_new(true)
        .mode(FILE_MODE)
        .open(path)
    {
        Ok(f) => f.set_permissions(std::fs::Permissions::from_mode(FILE_MODE)),
        Err(e) if e.kind() == std::io::ErrorKind::AlreadyExists => Ok(()),
        Err(e) => Err(e),
    }
}
