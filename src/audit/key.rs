//! The chain key's file and the witness file of the chain's head.
//!
//! The key file holds 64 hex digits (32 random bytes from the operating system), is
//! created with mode 0600 and refused when group or others may read it. Its bytes are
//! never logged, printed or stored in the database. The witness file holds the newest
//! event as `SEQ:HASH`, replaced atomically (written beside, synced, renamed).

use std::io::{Read, Write};
use std::path::{Path, PathBuf};

use crate::model::chain::{ChainKey, Head, KEY_BYTES};

/// Why the key or the witness file could not be used. Messages name the file, never
/// its content.
#[derive(Debug, thiserror::Error)]
pub enum KeyError {
    #[error("chain key file {path}: {source}")]
    Io {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("chain key file {path} has mode {mode:o}: readable by group or others; chmod 600")]
    Exposed { path: PathBuf, mode: u32 },
    #[error("chain key file {path} does not hold 64 hex digits")]
    Malformed { path: PathBuf },
    #[error("witness file {path}: {source}")]
    Witness {
        path: PathBuf,
        source: std::io::Error,
    },
    #[error("witness file {path} does not hold SEQ:HASH: {message}")]
    BadWitness { path: PathBuf, message: String },
}

fn io(path: &Path) -> impl FnOnce(std::io::Error) -> KeyError + '_ {
    move |source| KeyError::Io {
        path: path.to_path_buf(),
        source,
    }
}

/// Read the key at `path`; None when there is no such file.
pub fn load(path: &Path) -> Result<Option<ChainKey>, KeyError> {
    let mut file = match std::fs::File::open(path) {
        Ok(f) => f,
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => return Ok(None),
        Err(e) => return Err(io(path)(e)),
    };
    #[cfg(unix)]
    {
        use std::os::unix::fs::PermissionsExt;
        let mode = file.metadata().map_err(io(path))?.permissions().mode() & 0o777;
        if mode & 0o077 != 0 {
            return Err(KeyError::Exposed {
                path: path.to_path_buf(),
                mode,
            });
        }
    }
    let mut text = String::new();
    file.read_to_string(&mut text).map_err(io(path))?;
    let malformed = || KeyError::Malformed {
        path: path.to_path_buf(),
    };
    let bytes = hex::decode(text.trim()).map_err(|_| malformed())?;
    let bytes: [u8; KEY_BYTES] = bytes.try_into().map_err(|_| malformed())?;
    Ok(Some(ChainKey::new(bytes)))
}

/// Create a new key at `path` (mode 0600, never over an existing file) and return it.
pub fn create(path: &Path) -> Result<ChainKey, KeyError> {
    let mut bytes = [0u8; KEY_BYTES];
    std::fs::File::open("/dev/urandom")
        .and_then(|mut f| f.read_exact(&mut bytes))
        .map_err(io(Path::new("/dev/urandom")))?;
    if let Some(dir) = path.parent().filter(|d| !d.as_os_str().is_empty()) {
        crate::modes::create_dirs(dir).map_err(io(path))?;
    }
    let mut options = std::fs::OpenOptions::new();
    options.write(true).create_new(true);
    #[cfg(unix)]
    {
        use std::os::unix::fs::OpenOptionsExt;
        options.mode(0o600);
    }
    let mut file = options.open(path).map_err(io(path))?;
    file.write_all(hex::encode(bytes).as_bytes())
        .and_then(|_| file.write_all(b"\n"))
        .and_then(|_| file.sync_all())
        .map_err(io(path))?;
    tracing::info!(path = %path.display(), "created the audit chain's key file");
    Ok(ChainKey::new(bytes))
}

/// Write `head` to the witness file at `path`, replacing it atomically.
pub fn publish_head(path: &Path, head: &Head) -> Result<(), KeyError> {
    let err = |source| KeyError::Witness {
        path: path.to_path_buf(),
        source,
    };
    let mut tmp = path.as_os_str().to_owned();
    tmp.push(".new");
    let tmp = PathBuf::from(tmp);
    crate::modes::write_file(&tmp, format!("{head}\n").as_bytes()).map_err(err)?;
    std::fs::rename(&tmp, path).map_err(err)
}

/// The head published in the witness file at `path`; None when there is no such file.
pub fn read_head(path: &Path) -> Result<Option<Head>, KeyError> {
    match std::fs::read_to_string(path) {
        Ok(text) => text
            .trim()
            .parse()
            .map(Some)
            .map_err(|message| KeyError::BadWitness {
                path: path.to_path_buf(),
                message,
            }),
        Err(e) if e.kind() == std::io::ErrorKind::NotFound => Ok(None),
        Err(source) => Err(KeyError::Witness {
            path: path.to_path_buf(),
            source,
        }),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_created_key_is_private_and_reads_back() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("k");
        let key = create(&path).unwrap();
        #[cfg(unix)]
        {
            use std::os::unix::fs::PermissionsExt;
            let mode = std::fs::metadata(&path).unwrap().permissions().mode() & 0o777;
            assert_eq!(mode, 0o600);
        }
        assert_eq!(load(&path).unwrap(), Some(key));
        assert!(create(&path).is_err(), "an existing key is never replaced");
        assert_eq!(load(&dir.path().join("none")).unwrap(), None);
    }

    #[cfg(unix)]
    #[test]
    fn a_key_readable_by_others_is_refused() {
        use std::os::unix::fs::PermissionsExt;
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("k");
        create(&path).unwrap();
        std::fs::set_permissions(&path, std::fs::Permissions::from_mode(0o644)).unwrap();
        let e = load(&path).unwrap_err().to_string();
        assert!(
            e.contains("644") && e.contains("readable by group or others"),
            "{e}"
        );
    }

    #[test]
    fn the_witness_holds_the_head_it_was_given() {
        let dir = tempfile::tempdir().unwrap();
        let path = dir.path().join("head");
        assert_eq!(read_head(&path).unwrap(), None);
        let h = Head {
            seq: 7,
            hash: "ab".repeat(32),
        };
        publish_head(&path, &h).unwrap();
        assert_eq!(read_head(&path).unwrap(), Some(h));
        std::fs::write(&path, "seven").unwrap();
        assert!(read_head(&path).is_err());
    }
}
