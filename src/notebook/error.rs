//! The application's one error type. The command line maps each kind to an exit status.

use crate::config::ConfigError;
use crate::mail::MailError;
use crate::store::StoreError;

/// Why a unit of work of the notebook did not complete.
#[derive(Debug, thiserror::Error)]
pub enum NotebookError {
    /// An argument or choice of the caller that cannot work (a usage error).
    #[error("{0}")]
    Usage(String),
    /// The configuration could not be read or is not valid.
    #[error(transparent)]
    Config(#[from] ConfigError),
    /// The input was read and refused: a record that fails its checks, an unknown lot.
    #[error("{0}")]
    Refused(String),
    #[error(transparent)]
    Store(#[from] StoreError),
    #[error(transparent)]
    Mail(#[from] MailError),
    #[error("input/output error: {0}")]
    Io(#[from] std::io::Error),
    #[error("cannot encode JSON: {0}")]
    Json(#[from] serde_json::Error),
}

pub type Result<T, E = NotebookError> = std::result::Result<T, E>;
