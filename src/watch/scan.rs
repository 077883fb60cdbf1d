//! Looking at the file system: which paths are files we may offer, and directory scans.
//!
//! Rules, in order: the path must lie below the watched root (directly, unless the folder
//! is recursive); no name between the root and the file may match an ignore pattern;
//! directories are not files; a symbolic link is followed only when its target resolves
//! to a regular file inside the watched root, so a link cannot smuggle in a file from
//! elsewhere. Inside links are offered under the link's own path but deduplicated by the
//! resolved path, so link and target are offered once.
//!
//! What is neither a file to offer nor a folder nor ignored (a link leading out of the
//! root, to a folder or to nothing; a named pipe, a socket, a device) is an entry to
//! report: [`Root::refusal`] names what it is, and the watcher hands it on as refused.

use std::collections::{HashMap, HashSet};
use std::ffi::OsString;
use std::fs;
use std::io;
use std::path::{Component, Path, PathBuf};
use std::time::{Duration, SystemTime};

use globset::GlobSet;

use super::settle::Stamp;

/// A watched folder resolved for use: canonical path, recursion, compiled ignore patterns.
#[derive(Debug, Clone)]
pub(crate) struct Root {
    /// Index of the `[[folders]]` entry.
    pub index: usize,
    /// Canonical (absolute, link-free) folder path.
    pub canonical: PathBuf,
    pub recursive: bool,
    pub ignore: GlobSet,
}

/// Why a path is not offered; used for debug logs and tests.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Skip {
    OutsideRoot,
    TooDeep,
    Ignored,
    Gone,
    Unreadable,
    Directory,
    LinkOutside,
    /// A symbolic link whose target does not exist.
    LinkBroken,
    /// A symbolic link to a folder (folders are watched where they are).
    LinkToFolder,
    NotRegular,
}

/// What kind of entry a file type is, in words, for messages.
pub fn entry_kind(t: &fs::FileType) -> &'static str {
    use std::os::unix::fs::FileTypeExt;
    if t.is_file() {
        "a regular file"
    } else if t.is_dir() {
        "a folder"
    } else if t.is_symlink() {
        "a symbolic link"
    } else if t.is_fifo() {
        "a named pipe (FIFO)"
    } else if t.is_socket() {
        "a socket"
    } else if t.is_block_device() {
        "a block device"
    } else if t.is_char_device() {
        "a character device"
    } else {
        "an entry of unknown kind"
    }
}

/// `Ok` when the symbolic link at `link` leads to a regular file inside `root` (a
/// canonical folder path); otherwise why it is not followed, naming where it leads.
pub fn judge_link(link: &Path, root: &Path) -> Result<(), String> {
    let target = fs::canonicalize(link).map_err(|e| {
        format!("a symbolic link whose target cannot be reached ({e}); expected an export file")
    })?;
    if !target.starts_with(root) {
        return Err(format!(
            "a symbolic link to {}, outside the folder {}; only links to files inside it are followed",
            target.display(),
            root.display()
        ));
    }
    match fs::metadata(&target) {
        Ok(m) if m.is_file() => Ok(()),
        Ok(m) => Err(format!(
            "a symbolic link to {}, not a regular file; expected a link to an export file",
            entry_kind(&m.file_type())
        )),
        Err(e) => Err(format!(
            "a symbolic link whose target cannot be read ({e}); expected an export file"
        )),
    }
}

/// A file that may be offered: `key` is its resolved path (the identity used to avoid
/// offering the same version twice), `stamp` its current size and modification time.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct FileFound {
    pub path: PathBuf,
    pub key: PathBuf,
    pub stamp: Stamp,
}

/// An entry below the root that is not offered and must be reported: its path, why, and
/// its own size and time (not its target's), so an unchanged entry is reported once.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct Refused {
    pub path: PathBuf,
    pub reason: String,
    pub stamp: Stamp,
}

/// Every how many passes a poll folder is listed and looked at in full, whatever its
/// directories' times say: the safety net for a file rewritten in place (which does not
/// change its directory's time) and for file systems whose directory times lag.
pub(crate) const FULL_PASS_EVERY: u64 = 30;

/// How much older than its listing a directory's time must be to be trusted: a file
/// added within the same tick of a coarse clock (one or two seconds on some file
/// systems) would not change it.
const TRUST_AFTER: Duration = Duration::from_secs(3);

/// What a poll pass remembers of one directory.
#[derive(Debug, Default)]
struct DirMemo {
    /// The directory's modification time when it was listed, kept only when old enough
    /// to trust; `None`: list it again at the next pass.
    mtime: Option<SystemTime>,
    /// Each file's version as last seen, by name.
    files: HashMap<OsString, Stamp>,
    subdirs: Vec<PathBuf>,
}

/// A poll folder's memory across passes, so that a pass over an unchanged folder costs a
/// look at each directory's time and nothing per file.
#[derive(Debug, Default)]
pub(crate) struct PollMemory {
    dirs: HashMap<PathBuf, DirMemo>,
    passes: u64,
}

impl PollMemory {
    /// True when the next pass looks at everything (the first, then every
    /// [`FULL_PASS_EVERY`]-th).
    pub fn next_is_full(&self) -> bool {
        self.passes.is_multiple_of(FULL_PASS_EVERY)
    }
}

fn stamp_of(meta: &fs::Metadata) -> Stamp {
    Stamp {
        size: meta.len(),
        modified: meta.modified().ok(),
    }
}

impl Root {
    /// True when a name below the root matches an ignore pattern.
    fn ignored_name(&self, name: &std::ffi::OsStr) -> bool {
        self.ignore.is_match(Path::new(name))
    }

    /// Applies the rules above to one path (as reported by an event or a scan).
    pub fn examine(&self, path: &Path) -> Result<FileFound, Skip> {
        let rel = path
            .strip_prefix(&self.canonical)
            .map_err(|_| Skip::OutsideRoot)?;
        let mut depth = 0usize;
        for component in rel.components() {
            match component {
                Component::Normal(name) => {
                    depth += 1;
                    if self.ignored_name(name) {
                        return Err(Skip::Ignored);
                    }
                }
                // `..` or a second root would escape the folder.
                _ => return Err(Skip::OutsideRoot),
            }
        }
        if depth == 0 {
            return Err(Skip::Directory);
        }
        if depth > 1 && !self.recursive {
            return Err(Skip::TooDeep);
        }
        let own = fs::symlink_metadata(path).map_err(io_skip)?;
        if own.is_dir() {
            return Err(Skip::Directory);
        }
        let link = own.file_type().is_symlink();
        // Resolve links in the file and in any directory on the way; both must stay inside.
        let key = fs::canonicalize(path).map_err(|e| match io_skip(e) {
            Skip::Gone if link => Skip::LinkBroken,
            skip => skip,
        })?;
        if !key.starts_with(&self.canonical) {
            return Err(Skip::LinkOutside);
        }
        let meta = if link {
            fs::metadata(&key).map_err(io_skip)?
        } else {
            own
        };
        if !meta.is_file() {
            return Err(match (meta.is_dir(), link) {
                (true, true) => Skip::LinkToFolder,
                (true, false) => Skip::Directory,
                _ => Skip::NotRegular,
            });
        }
        Ok(FileFound {
            path: path.to_path_buf(),
            key,
            stamp: stamp_of(&meta),
        })
    }

    /// [`Root::examine`] for an entry a directory listing of the walk from the canonical
    /// root returned: the walk descends only real directories, so the path of a regular
    /// file found there is already its resolved path and is not resolved again (that
    /// lookup of every component was most of a poll pass's cost).
    fn examine_listed(&self, path: &Path, kind: fs::FileType) -> Result<FileFound, Skip> {
        if !kind.is_file() {
            return self.examine(path);
        }
        if path.file_name().is_some_and(|n| self.ignored_name(n)) {
            return Err(Skip::Ignored);
        }
        let meta = fs::symlink_metadata(path).map_err(io_skip)?;
        if !meta.is_file() {
            // Replaced since it was listed: the full rules decide.
            return self.examine(path);
        }
        Ok(FileFound {
            path: path.to_path_buf(),
            key: path.to_path_buf(),
            stamp: stamp_of(&meta),
        })
    }

    /// One poll pass over the folder: the files to offer and the entries to report.
    ///
    /// A full pass (see [`PollMemory::next_is_full`]) lists every directory and returns
    /// every file, as a scan of a folder never seen does. Other passes list only
    /// directories whose modification time changed (or was too recent to trust) and
    /// return only files new or changed since the pass that last listed them; a directory
    /// whose time did not change holds the same names, so nothing below it is looked at.
    pub fn scan_changes(&self, memo: &mut PollMemory) -> (Vec<FileFound>, Vec<Refused>) {
        let full = memo.next_is_full();
        memo.passes += 1;
        let mut found = Vec::new();
        let mut refused = Vec::new();
        let mut walked: HashSet<PathBuf> = HashSet::new();
        let mut stack = vec![self.canonical.clone()];
        while let Some(dir) = stack.pop() {
            let mtime = fs::metadata(&dir).ok().and_then(|m| m.modified().ok());
            let kept = memo.dirs.get(&dir);
            if !full && let Some(kept) = kept.filter(|k| k.mtime.is_some() && k.mtime == mtime) {
                stack.extend(kept.subdirs.iter().cloned());
                walked.insert(dir);
                continue;
            }
            let old = memo.dirs.remove(&dir).unwrap_or_default();
            let listed_at = SystemTime::now();
            let entries = match fs::read_dir(&dir) {
                Ok(entries) => entries,
                Err(error) => {
                    tracing::warn!(path = ?dir, %error, "cannot list folder");
                    continue;
                }
            };
            let mut memo_dir = DirMemo {
                mtime: mtime.filter(|t| {
                    listed_at
                        .duration_since(*t)
                        .is_ok_and(|age| age >= TRUST_AFTER)
                }),
                ..DirMemo::default()
            };
            for entry in entries.flatten() {
                let path = entry.path();
                let Ok(kind) = entry.file_type() else {
                    continue;
                };
                if kind.is_dir() {
                    if self.recursive && !self.ignored_name(&entry.file_name()) {
                        memo_dir.subdirs.push(path.clone());
                        stack.push(path);
                    }
                    continue;
                }
                match self.examine_listed(&path, kind) {
                    Ok(file) => {
                        let name = entry.file_name();
                        let changed = old.files.get(&name) != Some(&file.stamp);
                        memo_dir.files.insert(name, file.stamp);
                        if full || changed {
                            found.push(file);
                        }
                    }
                    Err(skip) => refused.extend(self.refused_entry(&path, skip)),
                }
            }
            memo.dirs.insert(dir.clone(), memo_dir);
            walked.insert(dir);
        }
        memo.dirs.retain(|d, _| walked.contains(d));
        sort_found(&mut found, &mut refused);
        (found, refused)
    }

    /// Why the entry at `path`, which [`Root::examine`] skipped for `skip`, is refused: a
    /// reason to record for what must be reported, `None` for what is rightly passed over
    /// (ignored names, folders, files gone or outside the root, deeper than watched).
    pub fn refusal(&self, path: &Path, skip: Skip) -> Option<String> {
        match skip {
            Skip::LinkOutside | Skip::LinkBroken | Skip::LinkToFolder => {
                judge_link(path, &self.canonical).err()
            }
            Skip::NotRegular => {
                let own = fs::symlink_metadata(path).ok()?;
                if own.file_type().is_symlink() {
                    return judge_link(path, &self.canonical).err();
                }
                let kind = entry_kind(&own.file_type());
                Some(format!(
                    "{kind}, not a regular file; expected an export file"
                ))
            }
            Skip::OutsideRoot
            | Skip::TooDeep
            | Skip::Ignored
            | Skip::Gone
            | Skip::Unreadable
            | Skip::Directory => None,
        }
    }

    /// Every file that may be offered under `dir` (the root or a sub-folder of it), oldest
    /// modification first so that a catch-up offers files roughly in the order they landed.
    /// Symbolic links to directories are not descended into; unreadable directories are
    /// logged and skipped.
    #[cfg(test)]
    pub fn scan(&self, dir: &Path) -> Vec<FileFound> {
        self.scan_all(dir).0
    }

    /// [`Root::scan`]'s files, and the entries it found to report as refused.
    pub fn scan_all(&self, dir: &Path) -> (Vec<FileFound>, Vec<Refused>) {
        let mut found = Vec::new();
        let mut refused = Vec::new();
        let mut stack = vec![dir.to_path_buf()];
        while let Some(current) = stack.pop() {
            let entries = match fs::read_dir(&current) {
                Ok(entries) => entries,
                Err(error) => {
                    tracing::warn!(path = %crate::logs::shown_path(&current), %error, "cannot list folder");
                    continue;
                }
            };
            for entry in entries.flatten() {
                let path = entry.path();
                let is_real_dir = entry.file_type().map(|t| t.is_dir()).unwrap_or(false);
                if is_real_dir {
                    if self.recursive && !self.ignored_name(&entry.file_name()) {
                        stack.push(path);
                    }
                    continue;
                }
                match self.examine(&path) {
                    Ok(file) => found.push(file),
                    Err(skip) => refused.extend(self.refused_entry(&path, skip)),
                }
            }
        }
        sort_found(&mut found, &mut refused);
        (found, refused)
    }

    /// The entry to report for a path [`Root::examine`] skipped, if it is one; what is
    /// passed over is logged (an unreadable entry as a warning).
    pub fn refused_entry(&self, path: &Path, skip: Skip) -> Option<Refused> {
        match self.refusal(path, skip) {
            Some(reason) => {
                let stamp = fs::symlink_metadata(path)
                    .map(|m| stamp_of(&m))
                    .unwrap_or(Stamp {
                        size: 0,
                        modified: None,
                    });
                Some(Refused {
                    path: path.to_path_buf(),
                    reason,
                    stamp,
                })
            }
            None if skip == Skip::Unreadable => {
                tracing::warn!(path = %crate::logs::shown_path(path), "cannot look at this entry; not offered");
                None
            }
            None => {
                tracing::trace!(path = %crate::logs::shown_path(path), ?skip, "not offered");
                None
            }
        }
    }
}

/// Oldest modification first, so that a catch-up offers files roughly in the order they
/// landed; refused entries by path.
fn sort_found(found: &mut [FileFound], refused: &mut [Refused]) {
    found.sort_by(|a, b| {
        a.stamp
            .modified
            .cmp(&b.stamp.modified)
            .then_with(|| a.path.cmp(&b.path))
    });
    refused.sort_by(|a, b| a.path.cmp(&b.path));
}

fn io_skip(error: io::Error) -> Skip {
    if error.kind() == io::ErrorKind::NotFound {
        Skip::Gone
    } else {
        Skip::Unreadable
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::watch::WatchFolder;

    fn root(dir: &Path, recursive: bool) -> Root {
        let mut folder = WatchFolder::new(dir, "p");
        folder.recursive = recursive;
        Root {
            index: 0,
            canonical: fs::canonicalize(dir).unwrap(),
            recursive,
            ignore: folder.ignore_set().unwrap(),
        }
    }

    #[test]
    fn regular_file_is_found_with_its_size() {
        let tmp = tempfile::tempdir().unwrap();
        let r = root(tmp.path(), false);
        let p = r.canonical.join("run-1.csv");
        fs::write(&p, b"12345").unwrap();
        let f = r.examine(&p).unwrap();
        assert_eq!(f.stamp.size, 5);
        assert_eq!(f.key, p);
    }

    #[test]
    fn ignored_missing_and_outside_paths_are_skipped() {
        let tmp = tempfile::tempdir().unwrap();
        let r = root(tmp.path(), true);
        fs::write(r.canonical.join("a.tmp"), b"x").unwrap();
        assert_eq!(r.examine(&r.canonical.join("a.tmp")), Err(Skip::Ignored));
        assert_eq!(r.examine(&r.canonical.join("nope.csv")), Err(Skip::Gone));
        assert_eq!(
            r.examine(Path::new("/etc/hostname")),
            Err(Skip::OutsideRoot)
        );
        assert_eq!(
            r.examine(&r.canonical.join("../x.csv")),
            Err(Skip::OutsideRoot)
        );
        fs::create_dir(r.canonical.join(".cache")).unwrap();
        fs::write(r.canonical.join(".cache/b.csv"), b"x").unwrap();
        assert_eq!(
            r.examine(&r.canonical.join(".cache/b.csv")),
            Err(Skip::Ignored)
        );
        assert!(r.scan(&r.canonical).is_empty());
    }

    /// Set a directory's modification time an hour back (old enough to be trusted).
    fn age(dir: &Path) {
        let hour_ago = SystemTime::now() - Duration::from_secs(3600);
        fs::File::open(dir).unwrap().set_modified(hour_ago).unwrap();
    }

    fn names(found: &[FileFound]) -> Vec<String> {
        let mut v: Vec<String> = found
            .iter()
            .map(|f| f.path.file_name().unwrap().to_string_lossy().into_owned())
            .collect();
        v.sort();
        v
    }

    #[test]
    fn poll_passes_look_only_at_changed_directories() {
        let tmp = tempfile::tempdir().unwrap();
        let r = root(tmp.path(), true);
        fs::create_dir(r.canonical.join("sub")).unwrap();
        fs::write(r.canonical.join("a.csv"), b"1").unwrap();
        fs::write(r.canonical.join("sub/c.csv"), b"1").unwrap();
        let mut memo = PollMemory::default();
        // The first pass sees everything, as a scan does; keys are the resolved paths.
        let (first, _) = r.scan_changes(&mut memo);
        assert_eq!(names(&first), ["a.csv", "c.csv"]);
        assert_eq!(first, r.scan(&r.canonical));
        // Directories changed just now are not trusted yet: listed again, nothing new.
        let (again, _) = r.scan_changes(&mut memo);
        assert!(again.is_empty(), "{again:?}");
        age(&r.canonical);
        age(&r.canonical.join("sub"));
        r.scan_changes(&mut memo);
        // A file rewritten in place leaves its directory's time alone: a quick pass does
        // not look, a full pass does.
        fs::write(r.canonical.join("a.csv"), b"22").unwrap();
        let (quick, _) = r.scan_changes(&mut memo);
        assert!(
            quick.is_empty(),
            "an unchanged directory is not read: {quick:?}"
        );
        // A new file changes its directory's time: found at the next pass, alone.
        fs::write(r.canonical.join("sub/d.csv"), b"1").unwrap();
        let (added, _) = r.scan_changes(&mut memo);
        assert_eq!(names(&added), ["d.csv"]);
        while !memo.next_is_full() {
            r.scan_changes(&mut memo);
        }
        let (full, _) = r.scan_changes(&mut memo);
        assert_eq!(names(&full), ["a.csv", "c.csv", "d.csv"]);
        let a = full.iter().find(|f| f.path.ends_with("a.csv")).unwrap();
        assert_eq!(a.stamp.size, 2, "the full pass sees the rewrite");
        // A removed directory is forgotten.
        fs::remove_file(r.canonical.join("sub/c.csv")).unwrap();
        fs::remove_file(r.canonical.join("sub/d.csv")).unwrap();
        fs::remove_dir(r.canonical.join("sub")).unwrap();
        r.scan_changes(&mut memo);
        assert!(!memo.dirs.contains_key(&r.canonical.join("sub")));
    }

    #[test]
    fn depth_follows_the_recursive_key() {
        let tmp = tempfile::tempdir().unwrap();
        fs::create_dir(tmp.path().join("sub")).unwrap();
        fs::write(tmp.path().join("sub/c.csv"), b"x").unwrap();
        let flat = root(tmp.path(), false);
        assert_eq!(
            flat.examine(&flat.canonical.join("sub/c.csv")),
            Err(Skip::TooDeep)
        );
        assert!(flat.scan(&flat.canonical).is_empty());
        let deep = root(tmp.path(), true);
        assert_eq!(deep.scan(&deep.canonical).len(), 1);
        assert_eq!(
            deep.examine(&deep.canonical.join("sub")),
            Err(Skip::Directory)
        );
    }

    #[cfg(unix)]
    #[test]
    fn links_are_followed_only_inside_the_root() {
        use std::os::unix::fs::symlink;
        let outside = tempfile::tempdir().unwrap();
        let tmp = tempfile::tempdir().unwrap();
        let r = root(tmp.path(), false);
        fs::write(outside.path().join("secret.csv"), b"x").unwrap();
        fs::write(r.canonical.join("real.csv"), b"abc").unwrap();
        symlink(
            outside.path().join("secret.csv"),
            r.canonical.join("out.csv"),
        )
        .unwrap();
        symlink(r.canonical.join("real.csv"), r.canonical.join("in.csv")).unwrap();
        symlink("/nonexistent-target", r.canonical.join("dangling.csv")).unwrap();
        assert_eq!(
            r.examine(&r.canonical.join("out.csv")),
            Err(Skip::LinkOutside)
        );
        assert_eq!(
            r.examine(&r.canonical.join("dangling.csv")),
            Err(Skip::LinkBroken)
        );
        let (_, refused) = r.scan_all(&r.canonical);
        let names: Vec<_> = refused
            .iter()
            .map(|f| f.path.file_name().unwrap().to_owned())
            .collect();
        assert_eq!(names, ["dangling.csv", "out.csv"]);
        assert!(refused[0].reason.contains("cannot be reached"));
        assert!(refused[1].reason.contains("secret.csv"));
        let inside = r.examine(&r.canonical.join("in.csv")).unwrap();
        assert_eq!(inside.key, r.canonical.join("real.csv"));
        assert_eq!(inside.stamp.size, 3);
        let names: Vec<_> = r.scan(&r.canonical).into_iter().map(|f| f.path).collect();
        assert_eq!(names.len(), 2, "{names:?}");
    }

    #[cfg(unix)]
    #[test]
    fn sockets_are_not_offered() {
        let tmp = tempfile::tempdir().unwrap();
        let r = root(tmp.path(), false);
        let sock = r.canonical.join("instrument.csv");
        let _listener = std::os::unix::net::UnixListener::bind(&sock).unwrap();
        assert_eq!(r.examine(&sock), Err(Skip::NotRegular));
        let reason = r.refusal(&sock, Skip::NotRegular).unwrap();
        assert!(
            reason.starts_with("a socket, not a regular file"),
            "{reason}"
        );
    }
}
