//! For plant IT: `/healthz` (database reachable, watcher running, age of the newest
//! ingest) and `/metrics` in the Prometheus text exposition format 0.0.4, with request
//! counts and a latency histogram measured here.

use std::collections::BTreeMap;
use std::fmt::Write as _;
use std::sync::Arc;
use std::sync::atomic::Ordering;
use std::time::Instant;

use axum::extract::{MatchedPath, Request, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use super::counters::{BUCKETS, Latency};
use super::state::Shared;
use crate::model::time::parse_ts;
use crate::notebook::{self, OpsFigures};

/// Count every request by its route (not its path, so lot names do not become labels).
pub async fn measure(State(s): State<Arc<Shared>>, req: Request, next: Next) -> Response {
    let route = req
        .extensions()
        .get::<MatchedPath>()
        .map_or("unmatched", MatchedPath::as_str)
        .to_string();
    let start = Instant::now();
    let r = next.run(req).await;
    let seconds = start.elapsed().as_secs_f64();
    s.metrics.record(&route, r.status().as_u16(), seconds);
    tracing::debug!(route = %route, status = r.status().as_u16(), seconds, "request");
    r
}

fn age_seconds(at: Option<&str>) -> Option<f64> {
    let t = parse_ts(at?).ok()?;
    Some((chrono::Utc::now() - t).num_milliseconds() as f64 / 1000.0)
}

/// `/healthz`: 200 when the database answers and the watcher runs, 503 otherwise.
pub async fn healthz(State(s): State<Arc<Shared>>) -> Response {
    let watching = s.watching.load(Ordering::SeqCst);
    let figures = s.blocking(notebook::ops_figures).await;
    let (database, newest) = match &figures {
        Ok(f) => ("reachable".to_string(), f.last_ingest_at.clone()),
        Err(e) => (format!("unreachable: {e}"), None),
    };
    let healthy = watching && figures.is_ok();
    let body = serde_json::json!({
        "status": if healthy { "ok" } else { "failing" },
        "database": database,
        "watcher": if watching { "running" } else { "stopped" },
        "newest_ingest_at": newest,
        "newest_ingest_age_seconds": age_seconds(newest.as_deref()),
    });
    let code = if healthy {
        StatusCode::OK
    } else {
        StatusCode::SERVICE_UNAVAILABLE
    };
    (code, axum::Json(body)).into_response()
}

/// `/metrics`: the text exposition format, version 0.0.4.
pub async fn metrics(State(s): State<Arc<Shared>>) -> Response {
    let figures = s.blocking(notebook::ops_figures).await.ok();
    let watching = s.watching.load(Ordering::SeqCst);
    let mut out = String::new();
    notebook_metrics(&mut out, figures.as_ref(), watching);
    let (counts, latency) = s.metrics.snapshot();
    request_metrics(&mut out, &counts, &latency);
    problem_metrics(&mut out, &crate::web::problem_counts());
    let mut r = out.into_response();
    r.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("text/plain; version=0.0.4; charset=utf-8"),
    );
    r
}

fn family(out: &mut String, name: &str, kind: &str, help: &str) {
    let _ = writeln!(out, "# HELP {name} {help}");
    let _ = writeln!(out, "# TYPE {name} {kind}");
}

fn sample(out: &mut String, name: &str, kind: &str, help: &str, value: f64) {
    family(out, name, kind, help);
    let _ = writeln!(out, "{name} {}", number(value));
}

/// A sample value as the format writes it.
fn number(v: f64) -> String {
    if v.is_nan() {
        "NaN".into()
    } else if v == f64::INFINITY {
        "+Inf".into()
    } else if v == f64::NEG_INFINITY {
        "-Inf".into()
    } else {
        format!("{v}")
    }
}

fn notebook_metrics(out: &mut String, f: Option<&OpsFigures>, watching: bool) {
    let up = |b: bool| if b { 1.0 } else { 0.0 };
    sample(
        out,
        "turnbook_database_reachable",
        "gauge",
        "1 when the database answered this scrape.",
        up(f.is_some()),
    );
    sample(
        out,
        "turnbook_watcher_running",
        "gauge",
        "1 while the folder watcher runs.",
        up(watching),
    );
    let Some(f) = f else { return };
    sample(
        out,
        "turnbook_files_ingested_total",
        "counter",
        "Export files whose records were stored.",
        f.files_ingested as f64,
    );
    sample(
        out,
        "turnbook_files_duplicate_total",
        "counter",
        "Files whose content had been ingested before.",
        f.duplicates as f64,
    );
    sample(
        out,
        "turnbook_files_quarantined_total",
        "counter",
        "Files rejected and copied to quarantine.",
        f.quarantined as f64,
    );
    sample(
        out,
        "turnbook_audit_events_total",
        "counter",
        "Events in the audit chain.",
        f.events as f64,
    );
    sample(
        out,
        "turnbook_outbox_waiting",
        "gauge",
        "Alert messages not yet delivered.",
        f.outbox_waiting as f64,
    );
    let oldest = age_seconds(f.outbox_oldest_queued_at.as_deref()).unwrap_or(0.0);
    sample(
        out,
        "turnbook_outbox_oldest_waiting_seconds",
        "gauge",
        "Age of the oldest undelivered message (0 when none waits).",
        oldest,
    );
    sample(
        out,
        "turnbook_fits_recomputed_total",
        "counter",
        "Lot fits computed and stored (each change to a lot's records refits it).",
        f.fits_stored as f64,
    );
    if let Some(t) = f.last_ingest_at.as_deref().and_then(|t| parse_ts(t).ok()) {
        sample(
            out,
            "turnbook_last_ingest_timestamp_seconds",
            "gauge",
            "When the newest file was ingested, Unix time.",
            t.timestamp_millis() as f64 / 1000.0,
        );
    }
}

fn label(v: &str) -> String {
    v.replace('\\', "\\\\")
        .replace('"', "\\\"")
        .replace('\n', "\\n")
}

fn request_metrics(
    out: &mut String,
    counts: &BTreeMap<(String, u16), u64>,
    latency: &BTreeMap<String, Latency>,
) {
    family(
        out,
        "turnbook_http_requests_total",
        "counter",
        "HTTP requests answered, by route and status.",
    );
    for ((route, status), n) in counts {
        let _ = writeln!(
            out,
            "turnbook_http_requests_total{{route=\"{}\",status=\"{status}\"}} {n}",
            label(route)
        );
    }
    let name = "turnbook_http_request_duration_seconds";
    family(
        out,
        name,
        "histogram",
        "Time to answer an HTTP request, by route.",
    );
    for (route, l) in latency {
        let r = label(route);
        for (le, n) in BUCKETS.iter().zip(l.buckets) {
            let _ = writeln!(out, "{name}_bucket{{route=\"{r}\",le=\"{le}\"}} {n}");
        }
        let _ = writeln!(
            out,
            "{name}_bucket{{route=\"{r}\",le=\"+Inf\"}} {}",
            l.count
        );
        let _ = writeln!(out, "{name}_sum{{route=\"{r}\"}} {}", number(l.sum));
        let _ = writeln!(out, "{name}_count{{route=\"{r}\"}} {}", l.count);
    }
}

/// Warnings and errors logged since the process started, by level and kind (the log
/// line's message, e.g. "file rejected and quarantined", "alert delivery failed").
fn problem_metrics(
    out: &mut String,
    counts: &std::collections::BTreeMap<(&'static str, String), u64>,
) {
    family(
        out,
        "turnbook_problems_total",
        "counter",
        "Warnings and errors logged since start, by level and kind (the log message).",
    );
    for ((level, kind), n) in counts {
        let _ = writeln!(
            out,
            "turnbook_problems_total{{level=\"{level}\",kind=\"{}\"}} {n}",
            label(kind)
        );
    }
}
