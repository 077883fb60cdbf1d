//! What every request shares: the configuration, the token, the change counter, request
//! metrics and the views computed since the last commit.

use std::collections::HashMap;
use std::sync::atomic::AtomicBool;
use std::sync::{Arc, Mutex};

use super::counters::RequestMetrics;
use super::token::Token;
use crate::config::Config;
use crate::notebook::{self, AuditView, LotPage, NotebookError, Overview};

/// Views kept until the next commit: every request between two commits shares them.
#[derive(Default)]
struct Cache {
    generation: u64,
    overview: Option<Arc<Overview>>,
    lots: HashMap<String, Arc<LotPage>>,
    audit: Option<Arc<AuditView>>,
    /// Rendered lots pages by sort key: the page of a large plant is large, and rendering
    /// it again for every request of the same generation was most of its cost.
    lots_pages: HashMap<&'static str, axum::body::Bytes>,
}

/// Lot pages kept at most (the oldest are not tracked: the map is simply emptied).
const LOT_PAGES_KEPT: usize = 256;

pub struct Shared {
    pub cfg: Config,
    pub token: Option<Token>,
    pub watching: Arc<AtomicBool>,
    /// Counts commits seen by the change watch; open pages refresh when it moves.
    pub changes: tokio::sync::watch::Sender<u64>,
    /// Turns true when the service stops, ending open event streams.
    pub stopping: tokio::sync::watch::Sender<bool>,
    pub metrics: RequestMetrics,
    cache: Mutex<Cache>,
    /// One view is computed at a time; the others wait and then find it made.
    computing: tokio::sync::Mutex<()>,
}

/// Why a view could not be made.
#[derive(Debug, thiserror::Error)]
pub enum ViewError {
    #[error(transparent)]
    Notebook(#[from] NotebookError),
    #[error("a view task failed: {0}")]
    Task(String),
}

impl Shared {
    pub fn new(cfg: Config, token: Option<Token>, watching: Arc<AtomicBool>) -> Self {
        Shared {
            cfg,
            token,
            watching,
            changes: tokio::sync::watch::Sender::new(0),
            stopping: tokio::sync::watch::Sender::new(false),
            metrics: RequestMetrics::default(),
            cache: Mutex::new(Cache::default()),
            computing: tokio::sync::Mutex::new(()),
        }
    }

    pub fn generation(&self) -> u64 {
        *self.changes.borrow()
    }

    /// Run blocking notebook work off the async threads.
    pub async fn blocking<T: Send + 'static>(
        &self,
        f: impl FnOnce(&Config) -> notebook::Result<T> + Send + 'static,
    ) -> Result<T, ViewError> {
        let cfg = self.cfg.clone();
        tokio::task::spawn_blocking(move || f(&cfg))
            .await
            .map_err(|e| ViewError::Task(e.to_string()))?
            .map_err(ViewError::from)
    }

    /// Look into the cache of the current generation (emptied when it moved).
    fn cached<T>(&self, pick: impl FnOnce(&mut Cache) -> Option<T>) -> Option<T> {
        let generation = self.generation();
        let mut c = self.cache.lock().unwrap_or_else(|p| p.into_inner());
        if c.generation != generation {
            *c = Cache {
                generation,
                ..Cache::default()
            };
        }
        pick(&mut c)
    }

    /// Keep a view made at `generation`, unless a commit came in meanwhile.
    fn keep(&self, generation: u64, put: impl FnOnce(&mut Cache)) {
        let mut c = self.cache.lock().unwrap_or_else(|p| p.into_inner());
        if c.generation == generation && self.generation() == generation {
            put(&mut c);
        }
    }

    /// The lots page rendered at this generation with this sort key, if kept.
    pub fn lots_page(&self, sort: &str) -> Option<axum::body::Bytes> {
        self.cached(|c| c.lots_pages.get(sort).cloned())
    }

    /// Keep a lots page rendered at `generation` (sort keys are the page's own few).
    pub fn keep_lots_page(&self, generation: u64, sort: &'static str, page: axum::body::Bytes) {
        self.keep(generation, |c| {
            c.lots_pages.insert(sort, page);
        });
    }

    pub async fn overview(&self) -> Result<Arc<Overview>, ViewError> {
        if let Some(v) = self.cached(|c| c.overview.clone()) {
            return Ok(v);
        }
        let _one = self.computing.lock().await;
        let generation = self.generation();
        if let Some(v) = self.cached(|c| c.overview.clone()) {
            return Ok(v);
        }
        let v = Arc::new(self.blocking(notebook::overview).await?);
        self.keep(generation, |c| c.overview = Some(Arc::clone(&v)));
        Ok(v)
    }

    pub async fn lot_page(&self, lot: &str) -> Result<Arc<LotPage>, ViewError> {
        if let Some(v) = self.cached(|c| c.lots.get(lot).cloned()) {
            return Ok(v);
        }
        let _one = self.computing.lock().await;
        let generation = self.generation();
        if let Some(v) = self.cached(|c| c.lots.get(lot).cloned()) {
            return Ok(v);
        }
        let name = lot.to_string();
        let v = Arc::new(
            self.blocking(move |cfg| notebook::lot_page(cfg, &name))
                .await?,
        );
        self.keep(generation, |c| {
            if c.lots.len() >= LOT_PAGES_KEPT {
                c.lots.clear();
            }
            c.lots.insert(lot.to_string(), Arc::clone(&v));
        });
        Ok(v)
    }

    pub async fn audit(&self) -> Result<Arc<AuditView>, ViewError> {
        if let Some(v) = self.cached(|c| c.audit.clone()) {
            return Ok(v);
        }
        let _one = self.computing.lock().await;
        let generation = self.generation();
        if let Some(v) = self.cached(|c| c.audit.clone()) {
            return Ok(v);
        }
        let v = Arc::new(self.blocking(notebook::audit_view).await?);
        self.keep(generation, |c| c.audit = Some(Arc::clone(&v)));
        Ok(v)
    }
}
