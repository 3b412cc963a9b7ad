//! The page at `/`: a browser client of the public API, built into the binary.
//!
//! Its HTML, CSS and JavaScript (`server/assets/`) are embedded with `include_str!`, so the
//! service needs no files beside the binary and the page works offline: it loads nothing
//! but these files and the answers of the `/v1/…` routes any other client uses. The routes
//! are served outside the OpenAPI document, which describes the API and not its clients.
//!
//! Each answer carries a strong entity tag made of a hash of its bytes and
//! `Cache-Control: no-cache`, so a browser revalidates on every load and gets `304` until a
//! new binary serves other bytes. A content security policy lets the page talk only to its
//! own origin.

use std::sync::OnceLock;

use axum::Router;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use axum::routing::get;

use crate::catalog::Fnv;
use crate::state::AppState;

/// One file of the page.
pub struct Asset {
    /// Where it is served.
    pub path: &'static str,
    /// Its text.
    pub body: &'static str,
    /// Its `Content-Type`.
    pub content_type: &'static str,
    tag: OnceLock<String>,
}

impl Asset {
    const fn new(path: &'static str, body: &'static str, content_type: &'static str) -> Self {
        Self { path, body, content_type, tag: OnceLock::new() }
    }

    /// The strong entity tag of its bytes.
    fn tag(&self) -> &str {
        self.tag.get_or_init(|| {
            let mut h = Fnv::default();
            h.write(self.body.as_bytes());
            format!("\"{:016x}\"", h.finish())
        })
    }
}

/// The page, its script, the map geometry the script imports, and its style sheet.
pub static ASSETS: [Asset; 4] = [
    Asset::new("/", include_str!("../assets/index.html"), "text/html; charset=utf-8"),
    Asset::new(
        "/assets/app.js",
        include_str!("../assets/app.js"),
        "text/javascript; charset=utf-8",
    ),
    Asset::new(
        "/assets/geo.js",
        include_str!("../assets/geo.js"),
        "text/javascript; charset=utf-8",
    ),
    Asset::new("/assets/style.css", include_str!("../assets/style.css"), "text/css; charset=utf-8"),
];

/// Only this origin, for scripts, styles, images and requests alike; inline styles are
/// allowed because the SVG pictures the page inserts may carry them.
const CONTENT_SECURITY_POLICY: &str = "default-src 'self'; script-src 'self'; \
    style-src 'self' 'unsafe-inline'; img-src 'self' data:; connect-src 'self'; \
    base-uri 'none'; form-action 'none'; frame-ancestors 'none'";

/// The routes of the page and its assets.
pub fn router() -> Router<AppState> {
    ASSETS.iter().fold(Router::new(), |router, asset| {
        router
            .route(asset.path, get(move |headers: HeaderMap| async move { serve(&headers, asset) }))
    })
}

/// `asset` with its type and tag, or `304` when `If-None-Match` names the tag.
fn serve(headers: &HeaderMap, asset: &'static Asset) -> Response {
    let tag = asset.tag();
    let fresh = headers
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .any(|v| v.split(',').any(|t| t.trim().trim_start_matches("W/") == tag));
    let mut response =
        if fresh { StatusCode::NOT_MODIFIED.into_response() } else { asset.body.into_response() };
    let h = response.headers_mut();
    h.insert(header::CONTENT_TYPE, HeaderValue::from_static(asset.content_type));
    h.insert(header::CACHE_CONTROL, HeaderValue::from_static("no-cache"));
    h.insert(header::X_CONTENT_TYPE_OPTIONS, HeaderValue::from_static("nosniff"));
    h.insert(header::CONTENT_SECURITY_POLICY, HeaderValue::from_static(CONTENT_SECURITY_POLICY));
    if let Ok(v) = HeaderValue::from_str(tag) {
        h.insert(header::ETAG, v);
    }
    response
}
