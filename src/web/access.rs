//! Who may read: on a loopback address anyone on the machine; elsewhere only requests that
//! carry the bearer token from `web.token_file`. The token is never logged or shown.

use std::net::SocketAddr;
use std::sync::Arc;

use axum::extract::{Request, State};
use axum::http::{HeaderValue, StatusCode, header};
use axum::middleware::Next;
use axum::response::{IntoResponse, Response};

use super::WebError;
use super::state::Shared;
use super::token::Token;
use crate::config::{Config, Web};

/// The token the `[web]` section asks for; refused when a non-loopback address has none,
/// or when its file can be read by others than the service's user.
pub fn load_token(cfg: &Config, web: &Web, addr: SocketAddr) -> Result<Option<Token>, WebError> {
    let Some(rel) = &web.token_file else {
        if addr.ip().is_loopback() {
            return Ok(None);
        }
        return Err(WebError::Refused(format!(
            "web.listen {addr} is reachable from other machines, so the web view needs a bearer \
             token: set web.token_file to a file only the service's user can read, or listen \
             on 127.0.0.1"
        )));
    };
    let path = cfg.resolve(rel);
    let meta = std::fs::metadata(&path).map_err(|e| {
        WebError::Refused(format!(
            "cannot read web.token_file {}: {e}",
            path.display()
        ))
    })?;
    private_to_owner(&path, &meta)?;
    let text = std::fs::read_to_string(&path).map_err(|e| {
        WebError::Refused(format!(
            "cannot read web.token_file {}: {e}",
            path.display()
        ))
    })?;
    Token::new(&text).map(Some).ok_or_else(|| {
        WebError::Refused(format!(
            "web.token_file {} is empty; write the bearer token into it",
            path.display()
        ))
    })
}

#[cfg(unix)]
fn private_to_owner(path: &std::path::Path, meta: &std::fs::Metadata) -> Result<(), WebError> {
    use std::os::unix::fs::PermissionsExt;
    let mode = meta.permissions().mode() & 0o777;
    if mode & 0o077 != 0 {
        return Err(WebError::Refused(format!(
            "web.token_file {} can be read by other users (mode {mode:o}); make it readable by \
             the service's user only (chmod 600)",
            path.display()
        )));
    }
    Ok(())
}

#[cfg(not(unix))]
fn private_to_owner(_path: &std::path::Path, _meta: &std::fs::Metadata) -> Result<(), WebError> {
    Ok(())
}

/// Refuse a request without the right `Authorization: Bearer` header when a token is set;
/// add the security headers to every response.
pub async fn guard(State(s): State<Arc<Shared>>, req: Request, next: Next) -> Response {
    if let Some(token) = &s.token {
        let given = req
            .headers()
            .get(header::AUTHORIZATION)
            .and_then(|v| v.as_bytes().strip_prefix(b"Bearer "));
        if !given.is_some_and(|g| token.matches(g)) {
            let mut r = (
                StatusCode::UNAUTHORIZED,
                "a bearer token is required (Authorization: Bearer ...)\n",
            )
                .into_response();
            r.headers_mut().insert(
                header::WWW_AUTHENTICATE,
                HeaderValue::from_static("Bearer realm=\"turnbook\""),
            );
            return secured(r);
        }
    }
    secured(next.run(req).await)
}

/// The strict policy of every page: nothing from elsewhere, no inline script or style.
pub const CSP: &str = "default-src 'none'; style-src 'self'; script-src 'self'; \
     img-src 'self' data:; connect-src 'self'; base-uri 'none'; form-action 'self'; \
     frame-ancestors 'none'";

fn secured(mut r: Response) -> Response {
    let h = r.headers_mut();
    if !h.contains_key(header::CONTENT_SECURITY_POLICY) {
        h.insert(
            header::CONTENT_SECURITY_POLICY,
            HeaderValue::from_static(CSP),
        );
    }
    h.insert(
        header::X_CONTENT_TYPE_OPTIONS,
        HeaderValue::from_static("nosniff"),
    );
    h.insert(
        header::REFERRER_POLICY,
        HeaderValue::from_static("no-referrer"),
    );
    h.insert(header::X_FRAME_OPTIONS, HeaderValue::from_static("DENY"));
    if !h.contains_key(header::CACHE_CONTROL) {
        h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    }
    r
}
