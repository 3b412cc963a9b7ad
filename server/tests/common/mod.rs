//! What the handler tests and the end-to-end tests share: the fixtures, a configuration
//! serving three of them, the table of bad requests, the router called through `oneshot`
//! ([`send`], [`get`], [`Answer`]), and the service on a real socket ([`Server`]).

#![allow(dead_code)] // each test binary uses its own part

use std::io::Write;
use std::path::{Path, PathBuf};
use std::sync::{Arc, Mutex};
use std::thread::JoinHandle;
use std::time::Duration;

use axum::Router;
use axum::body::{Body, Bytes};
use axum::http::{HeaderMap, Request, StatusCode, header};
use http_body_util::BodyExt;
use serde_json::Value;
use shearbox_server::app::run;
use shearbox_server::config::ServeConfig;
use shearbox_server::state::AppState;
use tower::ServiceExt;

/// The committed fixtures.
pub fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures")
}

/// Three fixtures as `tidy`, `global` and `temperature_only`, after the TOML lines `extra`.
pub fn config(extra: &str) -> ServeConfig {
    let text = format!(
        "{extra}\n[datasets]\ntidy = \"tidy_nc4.nc\"\nglobal = \"global_noleap.nc\"\n\
         temperature_only = \"temperature_only.nc\"\n"
    );
    ServeConfig::from_toml(&text, &fixtures()).expect("valid configuration")
}

/// A request that must fail.
pub type BadRequest = (String, u16, &'static str, &'static [&'static str]);

/// Each malformed or impossible request on the `tidy` dataset (`tidy_nc4.nc`: latitudes
/// 20..70, levels 1000, 925, 850, 700, 500, 400, 300, 250, 200 hPa, three times from
/// 2026-01-14T00:00:00Z to 2026-01-14T12:00:00Z): the URI, the status, the code, and words
/// the message must hold.
pub fn bad_requests() -> Vec<BadRequest> {
    let p = "/v1/datasets/tidy/profile";
    let l = "/v1/datasets/tidy/layer";
    vec![
        (format!("{p}?bbox=1,2,3"), 400, "invalid_bbox", &["four comma-separated numbers"]),
        (format!("{p}?bbox=a,40,10,50"), 400, "invalid_bbox", &["\"a\" is not a number"]),
        (format!("{p}?bbox=0,60,10,50"), 400, "invalid_bbox", &["south (60) is north of north"]),
        (format!("{p}?bbox=0,40,1e400,50"), 400, "invalid_bbox", &["finite"]),
        (format!("{p}?bbox=NaN,40,10,50"), 400, "invalid_bbox", &["finite"]),
        (format!("{p}?bbox=100,0,120,10"), 400, "empty_box", &["latitudes 20..70"]),
        (p.to_string(), 400, "missing_parameter", &["bbox is required"]),
        (
            "/v1/datasets/nope/profile?bbox=0,40,10,50".into(),
            404,
            "unknown_dataset",
            &["global, temperature_only, tidy"],
        ),
        (
            "/v1/datasets/..%2F..%2Fetc%2Fpasswd".into(),
            404,
            "unknown_dataset",
            &["no dataset named"],
        ),
        (
            format!("{p}?bbox=0,40,10,50&time=2030-01-01T00:00Z"),
            400,
            "time_not_found",
            &[
                "2030-01-01T00:00:00Z",
                "3 step(s) from 2026-01-14T00:00:00Z to 2026-01-14T12:00:00Z",
            ],
        ),
        (format!("{p}?bbox=0,40,10,50&time=yesterday"), 400, "invalid_time", &["ISO 8601"]),
        (
            format!("{l}?bottom=1000&top=600&bbox=0,40,10,50"),
            400,
            "level_not_found",
            &["600", "925"],
        ),
        (
            format!("{l}?bottom=500&top=1000&bbox=0,40,10,50"),
            400,
            "invalid_layer",
            &["bottom pressure"],
        ),
        (format!("{l}?top=500&bbox=0,40,10,50"), 400, "missing_parameter", &["bottom is required"]),
        (format!("{l}?bottom=abc&top=500&bbox=0,40,10,50"), 400, "invalid_parameter", &["\"abc\""]),
        (
            format!("{l}?bottom=1000&top=500&bbox=0,40,10,50&grid=true&stride=0"),
            400,
            "invalid_stride",
            &["at least 1"],
        ),
        (
            format!("{l}?bottom=1000&top=500&bbox=0,40,10,50&grid=true&stride=-2"),
            400,
            "invalid_stride",
            &["at least 1"],
        ),
        (
            format!("{l}?bottom=1000&top=500&bbox=0,40,10,50&grid=maybe"),
            400,
            "invalid_parameter",
            &["true or false"],
        ),
        (
            format!("{p}?bbox=0,40,10,50&foo=1"),
            400,
            "unknown_parameter",
            &["\"foo\"", "bbox, time"],
        ),
        (format!("{p}?bbox=0,40,10,50&bbox=0,40,10,50"), 400, "duplicate_parameter", &["bbox"]),
        ("/v1/datasets?limit=3".into(), 400, "unknown_parameter", &["\"limit\""]),
        ("/v2/anything".into(), 404, "not_found", &["/openapi.json"]),
        (
            "/v1/datasets/%FF/profile?bbox=0,40,10,50".into(),
            400,
            "invalid_parameter",
            &["malformed"],
        ),
    ]
}

/// An answer of the router, read whole.
pub struct Answer {
    pub status: StatusCode,
    pub headers: HeaderMap,
    pub body: Bytes,
}

impl Answer {
    pub fn json(&self) -> Value {
        serde_json::from_slice(&self.body)
            .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&self.body)))
    }

    pub fn text(&self) -> &str {
        std::str::from_utf8(&self.body).expect("UTF-8")
    }

    /// A header's value, or "" when it is absent or not text.
    pub fn header(&self, name: header::HeaderName) -> &str {
        self.headers.get(&name).and_then(|v| v.to_str().ok()).unwrap_or("")
    }
}

/// Sends `request` to the router through `oneshot` and reads the whole answer.
pub async fn send(router: &Router, request: Request<Body>) -> Answer {
    let response = router.clone().oneshot(request).await.expect("the router answers");
    let status = response.status();
    let headers = response.headers().clone();
    let body = response.into_body().collect().await.expect("a body").to_bytes();
    Answer { status, headers, body }
}

/// `GET uri` through `oneshot`.
pub async fn get(router: &Router, uri: &str) -> Answer {
    send(router, Request::get(uri).body(Body::empty()).unwrap()).await
}

/// The service serving on a socket of its own, on a thread of its own, until dropped.
pub struct Server {
    /// `127.0.0.1:PORT`.
    pub addr: String,
    pub state: AppState,
    stop: Option<tokio::sync::oneshot::Sender<()>>,
    thread: Option<JoinHandle<std::io::Result<()>>>,
}

impl Server {
    /// Serves `config` on a free loopback port.
    pub fn start(config: ServeConfig) -> Server {
        Self::start_on(config, "127.0.0.1:0")
    }

    /// Serves `config` on `bind`.
    pub fn start_on(config: ServeConfig, bind: &str) -> Server {
        let state = AppState::new(config);
        let listener = std::net::TcpListener::bind(bind).expect("a free port");
        listener.set_nonblocking(true).unwrap();
        let port = listener.local_addr().unwrap().port();
        let (stop, stopped) = tokio::sync::oneshot::channel::<()>();
        let serving = state.clone();
        let thread = std::thread::spawn(move || {
            let runtime = tokio::runtime::Builder::new_multi_thread()
                .worker_threads(2)
                .enable_all()
                .build()?;
            runtime.block_on(async move {
                let listener = tokio::net::TcpListener::from_std(listener)?;
                run(listener, serving, async {
                    let _ = stopped.await;
                })
                .await
            })
        });
        Server { addr: format!("127.0.0.1:{port}"), state, stop: Some(stop), thread: Some(thread) }
    }

    /// `http://127.0.0.1:PORT`.
    pub fn base(&self) -> String {
        format!("http://{}", self.addr)
    }

    /// Asks for shutdown and waits for `run` to return.
    pub fn stop(&mut self) -> std::io::Result<()> {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        self.thread.take().map_or(Ok(()), |t| t.join().expect("the server thread ends"))
    }
}

impl Drop for Server {
    fn drop(&mut self) {
        if let Some(stop) = self.stop.take() {
            let _ = stop.send(());
        }
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

/// A log writer into a shared buffer, for tests that read what the service logged.
pub struct Sink(pub Arc<Mutex<Vec<u8>>>);

impl Write for Sink {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.0.lock().unwrap().extend_from_slice(buf);
        Ok(buf.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

/// An HTTP client that returns error statuses as answers, with a 60 s limit per call.
pub fn agent() -> ureq::Agent {
    ureq::Agent::config_builder()
        .http_status_as_error(false)
        .timeout_global(Some(Duration::from_secs(60)))
        .build()
        .into()
}
