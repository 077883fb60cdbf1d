//! The service's read-only web view: pages for people who do not open a terminal, a JSON
//! API with the command line's `--json` shapes, server-sent events that tell open pages to
//! refresh after a commit, and `/healthz` and `/metrics` for plant IT.
//!
//! Above [`crate::notebook`] (whose views it calls, never the store) and below
//! [`crate::cli`], which starts it beside the watcher. No page changes a record.

mod access;
mod api;
mod assets;
mod counters;
mod live;
mod lot_page;
mod ops;
mod pages;
mod render;
mod state;
mod token;

use std::net::SocketAddr;
use std::sync::Arc;
use std::sync::atomic::AtomicBool;
use std::time::Duration;

use axum::Router;
use axum::routing::get;

use crate::config::{Config, Web};
use crate::notebook::{ServiceContext, SideTask};
use state::Shared;

pub use counters::{ProblemTally, problem_counts};
pub use token::Token;

/// Why the web view cannot start.
#[derive(Debug, thiserror::Error)]
pub enum WebError {
    /// A setting that cannot work, said in one sentence (a configuration error).
    #[error("{0}")]
    Refused(String),
}

/// The web view of one notebook: its router and the task that watches for commits.
#[derive(Clone)]
pub struct WebView {
    shared: Arc<Shared>,
}

impl WebView {
    /// A view of the notebook `cfg` names; requests must carry `token` when one is given.
    /// `watching` tells `/healthz` whether the folder watcher still runs.
    pub fn new(cfg: Config, token: Option<Token>, watching: Arc<AtomicBool>) -> Self {
        WebView {
            shared: Arc::new(Shared::new(cfg, token, watching)),
        }
    }

    /// Every route, with access, security headers and request metrics around them.
    pub fn router(&self) -> Router {
        let s = Arc::clone(&self.shared);
        Router::new()
            .route("/", get(pages::lots))
            .route("/lots/{lot}", get(pages::lot))
            .route("/lots/{lot}/report", get(pages::report))
            .route("/alerts", get(pages::alerts))
            .route("/files", get(pages::files))
            .route("/audit", get(pages::audit))
            .route("/assets/style.css", get(assets::style))
            .route("/assets/live.js", get(assets::script))
            .route("/assets/icon.svg", get(assets::icon))
            .route("/favicon.ico", get(assets::icon))
            .route("/events", get(live::events))
            .route("/api/lots", get(api::lots))
            .route("/api/lots/{lot}", get(api::lot))
            .route("/api/lots/{lot}/history", get(api::history))
            .route("/api/status", get(api::status))
            .route("/healthz", get(ops::healthz))
            .route("/metrics", get(ops::metrics))
            .fallback(pages::not_found)
            .layer(axum::middleware::from_fn_with_state(
                Arc::clone(&s),
                access::guard,
            ))
            .layer(axum::middleware::from_fn_with_state(
                Arc::clone(&s),
                ops::measure,
            ))
            .with_state(s)
    }

    /// Watch the database for commits (about every 250 ms) and tell open pages, until
    /// `stop` turns true.
    pub async fn watch_changes(&self, stop: tokio::sync::watch::Receiver<bool>) {
        live::watch_changes(Arc::clone(&self.shared), stop).await;
    }
}

/// The web view ready to serve: its socket is bound, so a busy port or a refused setting
/// is known before the service starts.
pub struct Prepared {
    listener: std::net::TcpListener,
    /// The address it listens on (the port is the real one when 0 was asked).
    pub address: SocketAddr,
    cfg: Config,
    token: Option<Token>,
}

/// Check the `[web]` section and bind its address; `None` when there is no `[web]`.
pub fn prepare(cfg: &Config) -> Result<Option<Prepared>, WebError> {
    let Some(web) = &cfg.web else {
        return Ok(None);
    };
    let addr = web.address().ok_or_else(|| {
        WebError::Refused(format!(
            "web.listen '{}' is not an address and port",
            web.listen
        ))
    })?;
    prepare_at(cfg, web, addr).map(Some)
}

/// [`prepare`] at `addr` instead of the configured address (the demo's fallback port).
pub fn prepare_at(cfg: &Config, web: &Web, addr: SocketAddr) -> Result<Prepared, WebError> {
    let token = access::load_token(cfg, web, addr)?;
    let listener = std::net::TcpListener::bind(addr).map_err(|e| {
        WebError::Refused(format!(
            "cannot listen on {addr} (web.listen): {e}; choose another port or stop what uses it"
        ))
    })?;
    listener
        .set_nonblocking(true)
        .map_err(|e| WebError::Refused(format!("cannot listen on {addr}: {e}")))?;
    let address = listener.local_addr().unwrap_or(addr);
    Ok(Prepared {
        listener,
        address,
        cfg: cfg.clone(),
        token,
    })
}

impl Prepared {
    /// The web view as a task of the service: served until the service's stop signal.
    pub fn into_task(self) -> SideTask {
        ("web", Box::new(move |ctx| Box::pin(self.serve(ctx))))
    }

    async fn serve(self, ctx: ServiceContext) {
        let view = WebView::new(self.cfg, self.token, ctx.watching);
        let listener = match tokio::net::TcpListener::from_std(self.listener) {
            Ok(l) => l,
            Err(e) => {
                tracing::error!(error = %e, "the web view could not take its socket");
                return;
            }
        };
        tracing::info!(address = %self.address, "web view serving");
        let changes = tokio::spawn({
            let view = view.clone();
            let stop = ctx.stop.clone();
            async move { view.watch_changes(stop).await }
        });
        let mut stop = ctx.stop.clone();
        let stopped = async move {
            while !*stop.borrow() {
                if stop.changed().await.is_err() {
                    break;
                }
            }
        };
        let server = axum::serve(listener, view.router()).with_graceful_shutdown(stopped);
        let mut late = ctx.stop.clone();
        tokio::select! {
            r = server => if let Err(e) = r {
                tracing::error!(error = %e, "the web view stopped");
            },
            // Clients that hold a request open past shutdown are not waited for long.
            _ = async {
                while !*late.borrow() {
                    if late.changed().await.is_err() { break; }
                }
                tokio::time::sleep(Duration::from_secs(5)).await;
            } => tracing::warn!("web requests still open 5 s after shutdown were dropped"),
        }
        if let Err(e) = changes.await {
            tracing::error!(error = %e, "the change watch ended abnormally");
        }
        tracing::info!("web view stopped");
    }
}
