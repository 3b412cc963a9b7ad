//! The page at `/`: a browser client of the public API, built into the binary.
//!
//! Its HTML, CSS and JavaScript (`server/assets/`) are embedded with `include_str!`, so the
//! service needs no files beside the binary and the page works offline: it loads nothing
//! but these three files and the answers of the `/v1/…` routes any other client uses. The
//! routes are served outside the OpenAPI document, which describes the API and not its
//! clients.
//!
//! Each answer carries a strong entity tag made of a hash of its bytes and
//! `Cache-Control: no-cache`, so a browser revalidates on every load and gets `304` until a
//! new binary serves other bytes. A content security policy allows the page to talk only to
//! its own origin.

use std::sync::OnceLock;

use axum::Router;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use axum::routing::get;

use crate::catalog::Fnv;
use crate::state::AppState;

/// The page's HTML.
pub const INDEX_HTML: &str = include_str!("../assets/index.html");
/// The page's script.
pub const APP_JS: &str = include_str!("../assets/app.js");
/// The page's style sheet.
pub const STYLE_CSS: &str = include_str!("../assets/style.css");

/// Where the page fetches its script and style sheet.
pub const APP_JS_PATH: &str = "/assets/app.js";
/// See [`APP_JS_PATH`].
pub const STYLE_CSS_PATH: &str = "/assets/style.css";

/// Only this origin, for scripts, styles, images and requests alike; inline styles are
/// allowed because the SVG pictures the page inserts may carry them.
const CONTENT_SECURITY_POLICY: &str = "default-src 'self'; script-src 'self'; \
    style-src 'self' 'unsafe-inline'; img-src 'self' data:; connect-src 'self'; \
    base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

/// The routes of the page and its assets.
pub fn router() -> Router<AppState> {
    Router::new()
        .route("/", get(index))
        .route(APP_JS_PATH, get(app_js))
        .route(STYLE_CSS_PATH, get(style_css))
}

async fn index(headers: HeaderMap) -> Response {
    static TAG: OnceLock<String> = OnceLock::new();
    asset(&headers, &TAG, INDEX_HTML, "text/html; charset=utf-8")
}

async fn app_js(headers: HeaderMap) -> Response {
    static TAG: OnceLock<String> = OnceLock::new();
    asset(&headers, &TAG, APP_JS, "text/javascript; charset=utf-8")
}

async fn style_css(headers: HeaderMap) -> Response {
    static TAG: OnceLock<String> = OnceLock::new();
    asset(&headers, &TAG, STYLE_CSS, "text/css; charset=utf-8")
}

/// `body` with its type and tag, or `304` when `If-None-Match` names the tag.
fn asset(
    headers: &HeaderMap,
    tag: &OnceLock<String>,
    body: &'static str,
    content_type: &'static str,
) -> Response {
    let tag = tag.get_or_init(|| {
        let mut h = Fnv::default();
        h.write(body.as_bytes());
        format!("\"{:016x}\"", h.finish())
    });
    let fresh = headers
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .any(|v| v.split(',').any(|t| t.trim().trim_start_matches("W/") == tag));
    let mut response =
        if fresh { StatusCode::NOT_MODIFIED.into_response() } else { body.into_response() };
    let h = response.headers_mut();
    h.insert(header::CONTENT_TYPE, HeaderValue::from_static(content_type));
    h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    h.insert(header::X_CONTENT_TYPE_OPTIONS, HeaderValue::from_static("nosniff"));
    h.insert(header::CONTENT_SECURITY_POLICY, HeaderValue::from_static(CONTENT_SECURITY_POLICY));
    if let Ok(v) = HeaderValue::from_str(tag) {
        h.insert(header::ETAG, v);
    }
    response
}
