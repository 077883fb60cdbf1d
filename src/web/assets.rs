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

/// The pages' icon: a catalyst bead on its support, drawn in the site's two colours.
/// Served at `/favicon.ico` too, where browsers ask for it unprompted (a missing icon is
/// a console error on every page).
const ICON: &str = r##"<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 32 32"><rect x="3" y="24" width="26" height="5" rx="1" fill="#5b6770"/><circle cx="16" cy="14" r="9" fill="#1f5f99"/><circle cx="13" cy="11" r="3" fill="#ffffff" opacity="0.6"/></svg>"##;

pub async fn icon() -> Response {
    asset(ICON, "image/svg+xml")
}
