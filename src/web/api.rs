//! The JSON behind the pages, in the shapes of the command line's `--json`:
//! `/api/lots` as `lots --json`, `/api/lots/{lot}` as `cycles LOT --format json`,
//! `/api/lots/{lot}/history` as `history LOT --json`, `/api/status` as `status --json`,
//! each object carrying the same `schema` version ([`notebook::JSON_SCHEMA`]).

use std::sync::Arc;

use axum::Json;
use axum::extract::{Path, State};
use axum::response::{IntoResponse, Response};

use super::pages::PageError;
use super::state::Shared;
use crate::notebook;

/// A JSON response with the command line's `schema` stamp.
fn stamped(value: &impl serde::Serialize) -> Result<Response, PageError> {
    let v = notebook::with_schema(value).map_err(|e| PageError::Failed(e.to_string()))?;
    Ok(Json(v).into_response())
}

pub async fn lots(State(s): State<Arc<Shared>>) -> Result<Response, PageError> {
    let lines = s.blocking(notebook::lot_lines).await?;
    stamped(&lines)
}

pub async fn lot(
    State(s): State<Arc<Shared>>,
    Path(lot): Path<String>,
) -> Result<Response, PageError> {
    let doc = s
        .blocking(move |cfg| {
            let state = notebook::known_lot(cfg, &lot)?;
            Ok(notebook::cycles_document(&state))
        })
        .await?;
    stamped(&doc)
}

pub async fn history(
    State(s): State<Arc<Shared>>,
    Path(lot): Path<String>,
) -> Result<Response, PageError> {
    let h = s.blocking(move |cfg| notebook::history(cfg, &lot)).await?;
    stamped(&h)
}

pub async fn status(State(s): State<Arc<Shared>>) -> Result<Response, PageError> {
    let st = s.blocking(notebook::status).await?;
    stamped(&st)
}
