//! The query strings of the box routes and the pictures (`bbox`, `time`, `bottom`, `top`,
//! `grid`, `stride` and anything else a client sends), through the whole service on a
//! committed fixture: every answer is a result or a 4xx, never a panic or a 5xx.
#![no_main]

use std::sync::OnceLock;

use axum::Router;
use axum::body::Body;
use axum::http::Request;
use libfuzzer_sys::fuzz_target;
use shearbox_server::app::app;
use shearbox_server::config::ServeConfig;
use shearbox_server::state::AppState;
use tower::ServiceExt;

fn service() -> &'static (tokio::runtime::Runtime, Router) {
    static SERVICE: OnceLock<(tokio::runtime::Runtime, Router)> = OnceLock::new();
    SERVICE.get_or_init(|| {
        let runtime =
            tokio::runtime::Builder::new_current_thread().enable_all().build().expect("a runtime");
        let fixtures = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures");
        let config = ServeConfig::from_toml("[datasets]\ntidy = \"tidy_nc4.nc\"\n", &fixtures)
            .expect("config");
        // Opening the datasets blocks: done before the runtime runs anything.
        let state = AppState::new(config);
        let router = {
            let _inside = runtime.enter();
            app(state)
        };
        (runtime, router)
    })
}

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    let (runtime, router) = service();
    for route in ["profile", "layer", "hodograph.svg", "map.svg"] {
        let uri = format!("/v1/datasets/tidy/{route}?{text}");
        let Ok(request) = Request::get(uri.as_str()).body(Body::empty()) else { return };
        let response = runtime.block_on(router.clone().oneshot(request)).expect("an answer");
        assert!(!response.status().is_server_error(), "{uri}: {}", response.status());
    }
});
