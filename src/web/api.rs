//! The JSON behind the pages, in the shapes of the command line's `--json`:
//! `/api/lots` as `lots --json`, `/api/lots/{lot}` as `cycles LOT --format json`,
//! `/api/lots/{lot}/history` as `history LOT --json`, `/api/status` as `status --json`.

use std::sync::Arc;

use axum::Json;
use axum::extract::{Path, State};
use axum::response::{IntoResponse, Response};

use super::pages::PageError;
use super::state::Shared;
use crate::notebook;

pub async fn lots(State(s): State<Arc<Shared>>) -> Result<Response, PageError> {
    let lines = s.blocking(notebook::lot_lines).await?;
    Ok(Json(lines).into_response())
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
    Ok(Json(doc).into_response())
}

pub async fn history(
    State(s): State<Arc<Shared>>,
    Path(lot): Path<String>,
) -> Result<Response, PageError> {
    let h = s.blocking(move |cfg| notebook::history(cfg, &lot)).await?;
    Ok(Json(h).into_response())
}

pub async fn status(State(s): State<Arc<Shared>>) -> Result<Response, PageError> {
    let st = s.blocking(notebook::status).await?;
    Ok(Json(st).into_response())
}
