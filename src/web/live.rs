//! Live pages: one task polls SQLite's data version about every 250 ms (a read, nothing
//! written) and counts commits; `/events` streams each count to open pages as a
//! server-sent event, and their script fetches the page again.

use std::convert::Infallible;
use std::sync::Arc;
use std::time::Duration;

use axum::extract::State;
use axum::response::sse::{Event, KeepAlive, Sse};
use tokio_stream::StreamExt as _;
use tokio_stream::wrappers::WatchStream;

use super::state::Shared;
use crate::notebook::ChangeWatch;

/// How often the database's version is read.
pub const POLL: Duration = Duration::from_millis(250);

/// Count commits until `stop` turns true, then end every open event stream.
pub async fn watch_changes(shared: Arc<Shared>, stop: tokio::sync::watch::Receiver<bool>) {
    count_commits(&shared, stop).await;
    shared.stopping.send_replace(true);
}

/// The polling loop; a database that cannot be opened is retried at the next tick.
async fn count_commits(shared: &Shared, mut stop: tokio::sync::watch::Receiver<bool>) {
    let mut watch: Option<ChangeWatch> = None;
    let mut last: Option<i64> = None;
    let mut tick = tokio::time::interval(POLL);
    tick.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    loop {
        if *stop.borrow() {
            return;
        }
        tokio::select! {
            _ = tick.tick() => {}
            r = stop.changed() => if r.is_err() { return } else { continue },
        }
        if watch.is_none() {
            match ChangeWatch::open(&shared.cfg) {
                Ok(w) => watch = Some(w),
                Err(e) => {
                    tracing::warn!(error = %e, "the change watch cannot open the database");
                    continue;
                }
            }
        }
        let version = watch.as_ref().map(ChangeWatch::version);
        match version {
            Some(Ok(v)) => {
                if last.is_some_and(|l| l != v) {
                    shared.changes.send_modify(|g| *g += 1);
                }
                last = Some(v);
            }
            Some(Err(e)) => {
                tracing::warn!(error = %e, "the change watch lost the database; reopening");
                watch = None;
            }
            None => {}
        }
    }
}

enum Signal {
    Changed(u64),
    Stop,
}

/// `/events`: one `change` event per counted commit, until the service stops.
pub async fn events(
    State(s): State<Arc<Shared>>,
) -> Sse<impl tokio_stream::Stream<Item = Result<Event, Infallible>>> {
    let changes = WatchStream::from_changes(s.changes.subscribe()).map(Signal::Changed);
    let stop = s.stopping.subscribe();
    let stopping = WatchStream::new(stop)
        .filter(|stopped| *stopped)
        .map(|_| Signal::Stop);
    let stream = changes
        .merge(stopping)
        .take_while(|sig| matches!(sig, Signal::Changed(_)))
        .map(|sig| {
            let n = match sig {
                Signal::Changed(n) => n,
                Signal::Stop => 0,
            };
            Ok(Event::default().event("change").data(n.to_string()))
        });
    Sse::new(stream).keep_alive(KeepAlive::new().interval(Duration::from_secs(15)))
}
