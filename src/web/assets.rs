//! The site's one style sheet and one script, served from the binary.

use axum::http::{HeaderValue, header};
use axum::response::{IntoResponse, Response};

const STYLE: &str = include_str!("style.css");
const SCRIPT: &str = include_str!("live.js");

fn asset(body: &'static str, kind: &'static str) -> Response {
    let mut r = body.into_response();
    let h = r.headers_mut();
    h.insert(header::CONTENT_TYPE, HeaderValue::from_static(kind));
    h.insert(
        header::CACHE_CONTROL,
        HeaderValue::from_static("max-age=300"),
    );
    r
}

pub async fn style() -> Response {
    asset(STYLE, "text/css; charset=utf-8")
}

pub async fn script() -> Response {
    asset(SCRIPT, "text/javascript; charset=utf-8")
}
