//! What a backfill of files and folders offers: every entry below a folder is either a
//! file to read or an entry refused with a reason, never left out without a word.
//!
//! A symbolic link below a folder is followed when it resolves to a regular file inside
//! that folder (the folder named to `ingest`), and is then read under the link's own path;
//! a link leading out of the folder, a link to a folder or to nothing, a named pipe, a
//! socket and a device are refused with a reason naming what they are.

use std::path::{Path, PathBuf};

use serde::Serialize;

use crate::watch::{entry_kind, judge_link};

/// An entry that is not read, with the reason.
#[derive(Debug, Clone, PartialEq, Eq, Serialize)]
pub struct RefusedEntry {
    pub path: PathBuf,
    pub reason: String,
}

/// What a backfill offers: the files to read, in path order, and the entries refused.
#[derive(Debug, Clone, Default)]
pub struct Listing {
    pub files: Vec<PathBuf>,
    pub refused: Vec<RefusedEntry>,
}

impl Listing {
    /// Every entry the listing accounts for.
    pub fn len(&self) -> usize {
        self.files.len() + self.refused.len()
    }

    pub fn is_empty(&self) -> bool {
        self.len() == 0
    }

    fn refuse(&mut self, path: PathBuf, reason: String) {
        self.refused.push(RefusedEntry { path, reason });
    }
}

/// The entries below the folder `path`, sorted, or `path` itself when it is not a folder.
pub fn collect_files(path: &Path, out: &mut Listing) -> std::io::Result<()> {
    // A path named by the user is followed: a link to a file or a folder counts as what it
    // points at. Anything that is not a folder is offered, so that what is not a regular
    // file (a pipe, a device) is refused by the reader with its kind named.
    if std::fs::metadata(path)?.is_dir() {
        let root = std::fs::canonicalize(path)?;
        collect_dir(path, &root, out)
    } else {
        out.files.push(path.to_path_buf());
        Ok(())
    }
}

/// The entries below `dir`, a folder inside `root` (the folder named by the user), sorted.
/// An entry's type comes with the listing (no stat per plain file); links are judged by
/// where they lead.
fn collect_dir(dir: &Path, root: &Path, out: &mut Listing) -> std::io::Result<()> {
    let mut entries = Vec::new();
    for e in std::fs::read_dir(dir)? {
        match e.and_then(|e| Ok((e.path(), e.file_type()?))) {
            Ok(pair) => entries.push(pair),
            Err(e) => out.refuse(
                dir.to_path_buf(),
                format!("an entry of this folder cannot be listed: {e}"),
            ),
        }
    }
    entries.sort_by(|a, b| a.0.cmp(&b.0));
    for (p, t) in entries {
        if t.is_file() {
            out.files.push(p);
        } else if t.is_dir() {
            collect_dir(&p, root, out)?;
        } else if t.is_symlink() {
            match judge_link(&p, root) {
                Ok(()) => out.files.push(p),
                Err(reason) => out.refuse(p, reason),
            }
        } else {
            let kind = entry_kind(&t);
            out.refuse(
                p,
                format!("{kind}, not a regular file; expected an export file"),
            );
        }
    }
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn links_and_special_entries_are_each_accounted_for() {
        use std::os::unix::fs::symlink;
        let outside = tempfile::tempdir().unwrap();
        let tmp = tempfile::tempdir().unwrap();
        let d = tmp.path();
        std::fs::write(outside.path().join("elsewhere.csv"), b"x").unwrap();
        std::fs::write(d.join("a.csv"), b"x").unwrap();
        std::fs::create_dir(d.join("sub")).unwrap();
        symlink(d.join("a.csv"), d.join("b-inside.csv")).unwrap();
        symlink(outside.path().join("elsewhere.csv"), d.join("c-out.csv")).unwrap();
        symlink(d.join("sub"), d.join("d-folder")).unwrap();
        symlink(d.join("none.csv"), d.join("e-dangling.csv")).unwrap();
        let _sock = std::os::unix::net::UnixListener::bind(d.join("f.sock")).unwrap();
        let mut l = Listing::default();
        collect_files(d, &mut l).unwrap();
        assert_eq!(l.files, vec![d.join("a.csv"), d.join("b-inside.csv")]);
        let reasons: Vec<(String, &str)> = l
            .refused
            .iter()
            .map(|r| {
                let name = r.path.file_name().unwrap().to_string_lossy().into_owned();
                (name, r.reason.as_str())
            })
            .collect();
        assert_eq!(reasons.len(), 4, "{reasons:?}");
        assert_eq!(reasons[0].0, "c-out.csv");
        assert!(reasons[0].1.contains("outside the folder"), "{reasons:?}");
        assert!(reasons[1].1.contains("link to a folder"), "{reasons:?}");
        assert!(reasons[2].1.contains("cannot be reached"), "{reasons:?}");
        assert!(reasons[3].1.starts_with("a socket"), "{reasons:?}");
        assert_eq!(l.len(), 6);
    }
}
