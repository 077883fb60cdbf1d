//! The pages: lots at a glance, one lot, its printable report, alerts, files and the audit
//! chain. Each reads a view of the notebook and renders it; none changes a record.

use std::sync::Arc;

use axum::extract::{Path, Query, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::response::{Html, IntoResponse, Response};
use maud::{Markup, html};
use serde::Deserialize;

use super::render::{cautions, forecast_words, lot_href, num, page, segment, svg};
use super::state::{Shared, ViewError};
use crate::notebook::{self, NotebookError, Overview};
use crate::report::{self, SiteLotLine};

/// Why a page could not be shown.
#[derive(Debug, thiserror::Error)]
pub enum PageError {
    #[error("{0}")]
    NotFound(String),
    #[error("{0}")]
    Failed(String),
}

impl From<ViewError> for PageError {
    fn from(e: ViewError) -> Self {
        match e {
            ViewError::Notebook(NotebookError::Refused(m)) => PageError::NotFound(m),
            e => PageError::Failed(e.to_string()),
        }
    }
}

impl IntoResponse for PageError {
    fn into_response(self) -> Response {
        let (code, title) = match &self {
            PageError::NotFound(_) => (StatusCode::NOT_FOUND, "Not found"),
            PageError::Failed(m) => {
                tracing::error!(error = %m, "a page could not be made");
                (StatusCode::INTERNAL_SERVER_ERROR, "Could not be shown")
            }
        };
        let body = page(title, "", html! { h1 { (title) } p { (self.to_string()) } });
        (code, Html(body.into_string())).into_response()
    }
}

pub async fn not_found() -> PageError {
    PageError::NotFound("there is no page at this address".into())
}

#[derive(Debug, Deserialize)]
pub struct LotsQuery {
    pub sort: Option<String>,
}

/// The sort keys of the lots table: (query value, column heading).
const SORTS: [(&str, &str); 8] = [
    ("lot", "Lot"),
    ("catalyst", "Catalyst"),
    ("state", "State"),
    ("cycles", "Cycles"),
    ("activity", "Latest activity"),
    ("forecast", "Forecast (cycle)"),
    ("alerts", "Open alerts"),
    ("signoff", "Sign-off"),
];

fn sort_lines<'a>(o: &'a Overview, key: &str) -> Vec<&'a SiteLotLine> {
    let mut lines: Vec<&SiteLotLine> = o.site.lots.iter().collect();
    let big = |v: Option<f64>| v.filter(|v| v.is_finite()).unwrap_or(f64::MAX);
    match key {
        "catalyst" => lines.sort_by(|a, b| a.catalyst.cmp(&b.catalyst)),
        "state" => lines.sort_by(|a, b| a.state.cmp(&b.state)),
        "cycles" => lines.sort_by_key(|l| std::cmp::Reverse(l.cycles)),
        "activity" => {
            lines.sort_by(|a, b| big(a.latest_activity).total_cmp(&big(b.latest_activity)))
        }
        "forecast" => lines.sort_by(|a, b| {
            big(a.forecast.as_ref().and_then(|f| f.x))
                .total_cmp(&big(b.forecast.as_ref().and_then(|f| f.x)))
        }),
        "alerts" => lines.sort_by_key(|l| std::cmp::Reverse(l.open_alerts)),
        "signoff" => lines.sort_by_key(|l| {
            o.signoffs
                .get(&l.lot)
                .map_or(crate::model::signoff::SignOffStatus::None, |s| s.state)
                .as_str()
        }),
        _ => lines.sort_by(|a, b| a.lot.cmp(&b.lot)),
    }
    lines
}

fn signoff_cell(o: &Overview, lot: &str) -> Markup {
    use crate::model::signoff::SignOffStatus;
    let Some((s, m)) = o.signoffs.get(lot).and_then(|s| Some((s, s.by.as_ref()?))) else {
        return html! { span.muted { "not signed" } };
    };
    let who = m.signer_or_unnamed();
    match s.state {
        SignOffStatus::Approved => html! { span.ok { "approved as " (who) } },
        SignOffStatus::Stale => html! {
            span.warn { "stale: " (m.meaning) " as " (who) ", changed since" }
        },
        st => html! { span.warn { (st.as_str()) " as " (who) } },
    }
}

/// `/`: every lot at a glance; `?sort=` one of the column keys.
pub async fn lots(
    State(s): State<Arc<Shared>>,
    Query(q): Query<LotsQuery>,
) -> Result<Html<axum::body::Bytes>, PageError> {
    let asked = q.sort.as_deref().unwrap_or("lot");
    // Only the page's own sort keys are kept, so no request can grow the cache.
    let known = SORTS.iter().map(|(k, _)| *k).find(|k| *k == asked);
    if let Some(page) = known.and_then(|k| s.lots_page(k)) {
        return Ok(Html(page));
    }
    let generation = s.generation();
    let o = s.overview().await?;
    let key = asked;
    let lines = sort_lines(&o, key);
    let pending = lines
        .iter()
        .filter(|l| l.state.starts_with("pending"))
        .count();
    let body = html! {
        h1 { "Lots" }
        p.muted { (lines.len()) " lots, " (pending) " pending (cycles recorded for a lot nobody registered)." }
        table #lots {
            thead { tr { @for (k, label) in SORTS {
                th { a href={ "/?sort=" (k) } { (label) @if k == key { " ▾" } } }
            } } }
            tbody { @for l in &lines {
                @let (fc, class) = forecast_words(l.forecast.as_ref());
                tr {
                    td { a href=(lot_href(&l.lot)) { (l.lot) } }
                    td { (l.catalyst) " " span.muted { (l.metal) } }
                    td class=[l.state.starts_with("pending").then_some("warn")] { (l.state) }
                    td.num { (l.cycles) }
                    td.num { span.spark { (svg(report::sparkline_svg(&l.activity_history, l.threshold))) } " " (num(l.latest_activity, 3)) }
                    td class=(class) { (fc) }
                    td.num class=[(l.open_alerts > 0).then_some("bad")] { (l.open_alerts) }
                    td { (signoff_cell(&o, &l.lot)) }
                }
            } }
        }
        (cautions())
    };
    let rendered = axum::body::Bytes::from(page("Lots", "/", body).into_string());
    if let Some(k) = known {
        s.keep_lots_page(generation, k, rendered.clone());
    }
    Ok(Html(rendered))
}

/// `/lots/{lot}`: one lot with its chart, cycles, alerts, history, sign-offs and audit.
pub async fn lot(
    State(s): State<Arc<Shared>>,
    Path(lot): Path<String>,
) -> Result<Html<String>, PageError> {
    let p = s.lot_page(&lot).await?;
    let body = super::lot_page::render(&lot, &p);
    Ok(Html(page(&format!("Lot {lot}"), "/", body).into_string()))
}

#[derive(Debug, Deserialize)]
pub struct ReportQuery {
    pub download: Option<String>,
}

/// `/lots/{lot}/report`: the lot's report as `turnbook report` writes it, made now.
pub async fn report(
    State(s): State<Arc<Shared>>,
    Path(lot): Path<String>,
    Query(q): Query<ReportQuery>,
) -> Result<Response, PageError> {
    let p = s.lot_page(&lot).await?;
    let mut r = Html(report::lot_html(&p.report)).into_response();
    let h = r.headers_mut();
    // The report is one self-contained file with its style inline; still no script.
    h.insert(
        header::CONTENT_SECURITY_POLICY,
        HeaderValue::from_static("default-src 'none'; style-src 'unsafe-inline'; img-src data:"),
    );
    if q.download.is_some() {
        let name = format!("attachment; filename=\"lot-{}.html\"", segment(&lot));
        if let Ok(v) = HeaderValue::from_str(&name) {
            h.insert(header::CONTENT_DISPOSITION, v);
        }
    }
    Ok(r)
}

/// `/alerts`: open alert conditions and the newest messages.
pub async fn alerts(State(s): State<Arc<Shared>>) -> Result<Html<String>, PageError> {
    let a = s.blocking(|cfg| notebook::alerts_view(cfg, 200)).await?;
    let body = html! {
        h1 { "Alerts" }
        h2 { "Open now (" (a.open.len()) ")" }
        @if a.open.is_empty() { p.ok { "No alert condition is open." } } @else {
            table #open-alerts {
                thead { tr { th { "Severity" } th { "Lot" } th { "Rule" } th { "State" } th { "Since" } th { "Subject" } } }
                tbody { @for o in &a.open { tr {
                    td class=[(o.severity == "critical").then_some("bad")] { (o.severity) }
                    td { a href=(lot_href(&o.lot)) { (o.lot) } }
                    td { (o.rule) } td { (o.state) } td { (o.since) } td { (o.subject) }
                } } }
            }
        }
        h2 { "Newest messages" }
        table #messages {
            thead { tr { th { "Queued" } th { "Lot" } th { "Rule" } th { "State" } th { "Subject" } th { "Delivered" } } }
            tbody { @for m in &a.recent { tr {
                td { (m.queued_at) } td { a href=(lot_href(&m.lot)) { (m.lot) } } td { (m.rule) }
                td { (m.state) } td { (m.subject) }
                td { @if let Some(d) = &m.delivered_at { (d) } @else { span.warn { "waiting" } } }
            } } }
        }
    };
    Ok(Html(page("Alerts", "/alerts", body).into_string()))
}

/// `/files`: files by outcome, quarantined ones with the parser's reason.
pub async fn files(State(s): State<Arc<Shared>>) -> Result<Html<String>, PageError> {
    let f = s.blocking(|cfg| notebook::files_view(cfg, 500)).await?;
    let body = html! {
        h1 { "Files" }
        p { (f.ingested) " ingested, " (f.duplicates) " duplicates (content seen before), "
            span class=[(f.quarantined > 0).then_some("warn")] { (f.quarantined) " quarantined" }
            ". The newest " (f.files.len()) " are listed." }
        table #files {
            thead { tr { th.num { "#" } th { "File" } th { "Recorded" } th { "Outcome" } th.num { "Rows new / known / conflicting" } th { "Reason, quarantine copy" } } }
            tbody { @for x in &f.files { tr {
                td.num { (x.id) }
                td { (x.path) br; span.hash { (x.sha256.get(..16).unwrap_or(&x.sha256)) } }
                td { (x.seen_at) }
                td class=[(x.outcome == "rejected").then_some("bad")] {
                    @if x.outcome == "rejected" { "quarantined" } @else { (x.outcome) }
                }
                td.num { (x.rows_new) " / " (x.rows_known) " / " (x.rows_conflict) }
                td { @if let Some(e) = &x.error { (e) } @if let Some(q) = &x.quarantined { br; span.muted { (q) } } }
            } } }
        }
    };
    Ok(Html(page("Files", "/files", body).into_string()))
}

/// `/audit`: the chain verified now, and its head.
pub async fn audit(State(s): State<Arc<Shared>>) -> Result<Html<String>, PageError> {
    let a = s.audit().await?;
    let body = html! {
        h1 { "Audit chain" }
        @if a.intact {
            p.ok #verdict { "Intact: every one of " (a.events) " events checks out, and every stored record matches the events that wrote it." }
        } @else {
            p.bad #verdict { "Broken: " (a.findings.len()) " finding(s)." }
            ul { @for f in &a.findings { li { (f) } } }
        }
        dl.facts {
            dt { "Last verified" } dd { (a.verified_at) " (verified again after every commit, when this page is opened)" }
            dt { "Head event" } dd { (a.head_seq.map_or("none".into(), |s| format!("#{s}"))) " " (a.head_at.clone().unwrap_or_default()) }
            dt { "Head hash" } dd.hash { (a.head_hash.clone().unwrap_or_default()) }
        }
    };
    Ok(Html(page("Audit chain", "/audit", body).into_string()))
}
