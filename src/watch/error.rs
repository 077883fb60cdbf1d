//! Typed errors of the watcher: configuration mistakes and set-up failures.

use std::path::PathBuf;

/// What can stop the watcher from starting. Once running, per-file problems are logged and
/// counted, never returned: one bad file must not stop the service.
#[derive(Debug, thiserror::Error)]
pub enum WatchError {
    /// A `[[folders]]` entry has a value that cannot work; `key` names the offending key.
    #[error("folders[{index}].{key}: {reason}")]
    InvalidFolder {
        /// Position of the entry in the `[[folders]]` list (0-based).
        index: usize,
        /// The configuration key at fault, e.g. `settle`.
        key: &'static str,
        /// What is wrong and what is expected.
        reason: String,
    },
    /// The folder does not exist, is not a directory or cannot be resolved.
    #[error("folders[{index}].path: cannot watch {path:?}: {reason}")]
    Unreachable {
        /// Position of the entry in the `[[folders]]` list (0-based).
        index: usize,
        /// The path as configured.
        path: PathBuf,
        /// Why it cannot be used.
        reason: String,
    },
    /// Two entries would see the same files, so a file's profile would be ambiguous.
    #[error(
        "folders[{first}].path and folders[{second}].path overlap ({path:?}): a file would belong to two entries"
    )]
    Overlap {
        /// The entry that contains the other (or the first of two identical ones).
        first: usize,
        /// The entry inside it.
        second: usize,
        /// The resolved path of the inner entry.
        path: PathBuf,
    },
    /// The operating system refused a file watch (e.g. the inotify watch limit).
    #[error("folders[{index}].path: cannot start file events for {path:?}: {source}")]
    Events {
        /// Position of the entry in the `[[folders]]` list (0-based).
        index: usize,
        /// The resolved path.
        path: PathBuf,
        /// The error reported by the event backend.
        #[source]
        source: notify::Error,
    },
    /// The worker thread that calls the sink could not be started.
    #[error("cannot start the ingestion worker thread: {0}")]
    Worker(#[source] std::io::Error),
}
