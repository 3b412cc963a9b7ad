//! The page at `/` and its assets, through `oneshot`: types, caching, nothing fetched from
//! outside, and only documented routes used. The page itself runs in a browser in
//! `tests/browser/`.

use axum::Router;
use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use serde_json::Value;
use shearbox_server::app::app;
use shearbox_server::state::AppState;
use tower::ServiceExt;

mod common;

use common::{Answer, get, send};

fn service(extra: &str) -> Router {
    app(AppState::new(common::config(extra)))
}

async fn get_with(router: &Router, uri: &str, headers: &[(header::HeaderName, &str)]) -> Answer {
    let mut request = Request::get(uri);
    for (k, v) in headers {
        request = request.header(k, *v);
    }
    send(router, request.body(Body::empty()).unwrap()).await
}

/// The values of `attr="…"` in `html`.
fn attribute_values<'a>(html: &'a str, attr: &str) -> Vec<&'a str> {
    let needle = format!(" {attr}=\"");
    html.match_indices(&needle)
        .filter_map(|(i, _)| {
            let rest = &html[i + needle.len()..];
            rest.find('"').map(|end| &rest[..end])
        })
        .collect()
}

/// The paths of `from "…"` in a script's imports.
fn imports(script: &str) -> Vec<&str> {
    script
        .match_indices(" from \"")
        .filter_map(|(i, m)| {
            let rest = &script[i + m.len()..];
            rest.find('"').map(|end| &rest[..end])
        })
        .collect()
}

/// Every file the page loads, found by following it from `/`: its path and `Content-Type`.
async fn page_files(router: &Router) -> Vec<(String, String)> {
    let page = get(router, "/").await;
    let mut files = vec![("/".to_string(), page.header(header::CONTENT_TYPE).to_string())];
    let mut scripts: Vec<String> =
        attribute_values(page.text(), "src").into_iter().map(str::to_string).collect();
    let sheets = attribute_values(page.text(), "href").into_iter().filter(|h| h.ends_with(".css"));
    for sheet in sheets {
        let css = get(router, sheet).await;
        files.push((sheet.to_string(), css.header(header::CONTENT_TYPE).to_string()));
    }
    while let Some(path) = scripts.pop() {
        if files.iter().any(|(p, _)| *p == path) {
            continue;
        }
        let script = get(router, &path).await;
        scripts.extend(imports(script.text()).into_iter().map(str::to_string));
        files.push((path, script.header(header::CONTENT_TYPE).to_string()));
    }
    files.sort();
    files
}

#[tokio::test]
async fn the_page_and_its_assets_are_served_with_their_types() {
    let router = service("");
    let page = get(&router, "/").await;
    assert_eq!(page.status, StatusCode::OK);
    assert!(page.text().starts_with("<!doctype html>"), "{}", &page.text()[..40]);
    let files = page_files(&router).await;
    let js = "text/javascript; charset=utf-8";
    let want = [
        ("/", "text/html; charset=utf-8"),
        ("/assets/app.js", js),
        ("/assets/geo.js", js),
        ("/assets/style.css", "text/css; charset=utf-8"),
    ];
    let want: Vec<(String, String)> =
        want.iter().map(|(p, t)| (p.to_string(), t.to_string())).collect();
    assert_eq!(files, want, "the files the page loads and their types");
    for (path, _) in &files {
        let asset = get(&router, path).await;
        assert_eq!(asset.status, StatusCode::OK, "{path}");
        assert_eq!(asset.header(header::CACHE_CONTROL), "no-cache", "{path}");
        assert_eq!(asset.header(header::X_CONTENT_TYPE_OPTIONS), "nosniff", "{path}");
        assert!(!asset.body.is_empty(), "{path}");
    }
    // HEAD answers like GET, without a body.
    let head = router
        .clone()
        .oneshot(Request::head("/").body(Body::empty()).unwrap())
        .await
        .expect("an answer");
    assert_eq!(head.status(), StatusCode::OK);
    assert_eq!(head.headers()[header::CONTENT_TYPE], "text/html; charset=utf-8");
}

#[tokio::test]
async fn nothing_is_fetched_from_outside() {
    let router = service("");
    for (path, _) in page_files(&router).await {
        let asset = get(&router, &path).await;
        let lower = asset.text().to_ascii_lowercase();
        for outside in ["http://", "https://", "src=\"//", "href=\"//", "url(//", "@import"] {
            assert!(!lower.contains(outside), "{path} holds {outside:?}");
        }
        // The browser enforces it too: only this origin, for everything.
        let policy = asset.header(header::CONTENT_SECURITY_POLICY);
        assert!(policy.starts_with("default-src 'self';"), "{path}: {policy}");
        assert!(policy.contains("connect-src 'self'"), "{path}: {policy}");
        assert!(!policy.contains('*') && !policy.contains("http"), "{path}: {policy}");
    }
}

#[tokio::test]
async fn a_tagged_asset_is_not_sent_twice() {
    let router = service("");
    let mut tags = std::collections::BTreeSet::new();
    let files = page_files(&router).await;
    for (path, _) in &files {
        let path = path.as_str();
        let first = get(&router, path).await;
        let tag = first.header(header::ETAG).to_string();
        assert!(tag.starts_with('"') && tag.len() > 2, "{path}: strong tag {tag:?}");
        let again = get_with(&router, path, &[(header::IF_NONE_MATCH, &tag)]).await;
        assert_eq!(again.status, StatusCode::NOT_MODIFIED, "{path}");
        assert!(again.body.is_empty(), "{path}");
        let other = get_with(&router, path, &[(header::IF_NONE_MATCH, "\"other\"")]).await;
        assert_eq!(other.status, StatusCode::OK, "{path}");
        tags.insert(tag);
    }
    assert_eq!(tags.len(), files.len(), "each file has its own tag: {tags:?}");
}

#[tokio::test]
async fn the_page_is_open_while_tokens_guard_the_api() {
    let router = service("tokens = [\"a-token-of-the-tests-0123\"]");
    assert_eq!(get(&router, "/").await.status, StatusCode::OK);
    assert_eq!(get(&router, "/assets/app.js").await.status, StatusCode::OK);
    assert_eq!(get(&router, "/v1/datasets").await.status, StatusCode::UNAUTHORIZED);
}

/// The routes the script's strings name, with `${…}` path parts as `{name}`.
fn routes_in_script(script: &str) -> Vec<String> {
    let mut routes: Vec<String> = script
        .match_indices("/v1/")
        .filter(|(i, _)| script[..*i].ends_with(['"', '`']))
        .map(|(i, _)| {
            let rest = &script[i..];
            let end = rest.find(['?', '`', '"', ' ']).unwrap_or(rest.len());
            let mut route = String::new();
            let mut parts = rest[..end].split("${");
            route.push_str(parts.next().unwrap_or(""));
            for part in parts {
                let close = part.find('}').expect("a closed ${…}");
                route.push_str("{name}");
                route.push_str(&part[close + 1..]);
            }
            route
        })
        .filter(|r| r.len() > "/v1/".len())
        .collect();
    routes.sort();
    routes.dedup();
    routes
}

#[tokio::test]
async fn the_page_uses_only_documented_routes() {
    let router = service("");
    let mut used = Vec::new();
    for (path, _) in page_files(&router).await.iter().filter(|(p, _)| p.ends_with(".js")) {
        used.extend(routes_in_script(get(&router, path).await.text()));
    }
    let doc: Value = serde_json::from_slice(&get(&router, "/openapi.json").await.body).unwrap();
    let paths = doc["paths"].as_object().expect("paths");
    for route in [
        "/v1/datasets",
        "/v1/datasets/{name}",
        "/v1/datasets/{name}/profile",
        "/v1/datasets/{name}/hodograph.svg",
        "/v1/datasets/{name}/map.svg",
    ] {
        assert!(used.iter().any(|u| u == route), "the script requests {route}: {used:?}");
    }
    for route in &used {
        assert!(paths.contains_key(route), "{route} is not in /openapi.json");
    }
    for (path, _) in page_files(&router).await {
        assert!(!paths.contains_key(&path), "{path} is a page, not an API operation");
    }
}

#[tokio::test]
async fn the_dataset_document_lists_every_time_the_page_offers() {
    let router = service("");
    let doc: Value = serde_json::from_slice(&get(&router, "/v1/datasets/tidy").await.body).unwrap();
    let times = &doc["times"];
    let values: Vec<&str> =
        times["values"].as_array().expect("values").iter().map(|v| v.as_str().unwrap()).collect();
    // tidy_nc4.nc: three steps, 6-hourly from 2026-01-14T00:00:00Z (fixtures/src/catalogue.rs).
    assert_eq!(values, ["2026-01-14T00:00:00Z", "2026-01-14T06:00:00Z", "2026-01-14T12:00:00Z"]);
    assert_eq!(times["count"], values.len());
    assert_eq!(times["first"], values[0]);
    assert_eq!(times["last"], values[values.len() - 1]);
    for t in values {
        let uri = format!("/v1/datasets/tidy/profile?bbox=0,40,10,50&time={t}");
        let answer = get(&router, &uri).await;
        assert_eq!(answer.status, StatusCode::OK, "{uri}: {}", answer.text());
        let profile: Value = serde_json::from_slice(&answer.body).unwrap();
        assert_eq!(profile["time"], t, "{uri}");
    }
}
