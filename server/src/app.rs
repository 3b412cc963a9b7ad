//! The router, its middleware, and running it.
//!
//! [`app`] builds the whole service as a `Router` with no socket, which handler tests drive
//! with `oneshot`; [`run`] serves it on a listener until a shutdown future completes, and
//! reloads changed dataset files in the background meanwhile; [`serve_blocking`] is what
//! `shearbox serve` calls: configuration, logging, runtime, signals.
//!
//! Layers, outermost first: a panic in a handler becomes a logged 500; gzip when the client
//! accepts it; CORS for the configured origins; one log line and the metrics per request;
//! a URI longer than [`crate::conn::MAX_URI_BYTES`] gets 414; bearer tokens on `/v1/…` when
//! configured. The log line names the method, route, URI, status and latency, never a
//! header, so tokens stay out of the log.
//!
//! [`run`] serves through [`crate::conn::serve`], which bounds each connection in time and
//! size, and warns when the address it listens on is reachable from other machines.

use std::future::Future;
use std::io::IsTerminal;
use std::path::PathBuf;
use std::time::{Duration, Instant};

use axum::Router;
use axum::body::Bytes;
use axum::extract::{MatchedPath, Request, State};
use axum::http::{HeaderValue, Method, header};
use axum::middleware::{self, Next};
use axum::response::{IntoResponse, Response};
use thiserror::Error;
use tokio::net::TcpListener;
use tower_http::catch_panic::CatchPanicLayer;
use tower_http::compression::CompressionLayer;
use tower_http::cors::{AllowOrigin, CorsLayer};
use utoipa::OpenApi;
use utoipa_axum::router::OpenApiRouter;
use utoipa_axum::routes;

use crate::api;
use crate::catalog::PollOutcome;
use crate::config::{ConfigError, ServeConfig, parse_bind};
use crate::error::ApiError;
use crate::metrics::Metrics;
use crate::state::AppState;

#[derive(OpenApi)]
#[openapi(
    info(
        title = "shearbox",
        description = "Thermal wind, thickness, geostrophic wind and baroclinicity of a box, \
            from CF NetCDF pressure-level datasets. Every number is a diagnostic computed from \
            model or reanalysis data, not an official forecast or warning; defer to your \
            national weather service's products and your own procedures.",
        license(name = "MIT OR Apache-2.0")
    ),
    components(schemas(crate::wire::ErrorDoc)),
    tags(
        (name = "datasets", description = "What the service offers"),
        (name = "queries", description = "Box queries"),
        (name = "pictures", description = "Hodograph and layer map as SVG"),
        (name = "service", description = "Health, readiness, metrics and this document")
    )
)]
struct ApiDoc;

/// The router and the OpenAPI document of its routes, generated from the handlers.
fn routes() -> (Router<AppState>, utoipa::openapi::OpenApi) {
    OpenApiRouter::with_openapi(ApiDoc::openapi())
        .routes(routes!(api::list_datasets))
        .routes(routes!(api::get_dataset))
        .routes(routes!(api::profile))
        .routes(routes!(api::layer))
        .routes(routes!(crate::pictures::hodograph))
        .routes(routes!(crate::pictures::map))
        .routes(routes!(api::healthz))
        .routes(routes!(api::readyz))
        .routes(routes!(api::metrics))
        .routes(routes!(api::openapi_json))
        .split_for_parts()
}

/// The OpenAPI 3.1 document of the service.
pub fn openapi() -> utoipa::openapi::OpenApi {
    routes().1
}

/// The whole service as a router, ready for `oneshot` or a listener.
pub fn app(state: AppState) -> Router {
    let (router, doc) = routes();
    if let Ok(json) = doc.to_json() {
        let _ = state.openapi.set(Bytes::from(json));
    }
    let mut router = router
        .merge(crate::page::router())
        .fallback(not_found)
        .method_not_allowed_fallback(method_not_allowed)
        .layer(middleware::from_fn_with_state(state.clone(), authenticate))
        .layer(middleware::from_fn(limit_uri))
        .layer(middleware::from_fn_with_state(state.clone(), observe));
    if let Some(cors) = cors(&state.config.cors_origins) {
        router = router.layer(cors);
    }
    router
        .layer(CompressionLayer::new())
        .layer(CatchPanicLayer::custom(|_: Box<dyn std::any::Any + Send>| {
            ApiError::internal("a handler panicked").into_response()
        }))
        .with_state(state)
}

fn cors(origins: &[String]) -> Option<CorsLayer> {
    if origins.is_empty() {
        return None;
    }
    let allow = if origins.iter().any(|o| o == "*") {
        AllowOrigin::any()
    } else {
        AllowOrigin::list(origins.iter().filter_map(|o| HeaderValue::from_str(o).ok()))
    };
    Some(
        CorsLayer::new()
            .allow_origin(allow)
            .allow_methods([Method::GET, Method::HEAD, Method::OPTIONS])
            .allow_headers([header::AUTHORIZATION, header::IF_NONE_MATCH])
            .expose_headers([header::ETAG, header::RETRY_AFTER])
            .max_age(Duration::from_secs(600)),
    )
}

async fn not_found(request: Request) -> ApiError {
    ApiError::NotFound {
        code: "not_found",
        message: format!(
            "no route {} {}; the routes are listed in /openapi.json",
            request.method(),
            request.uri().path()
        ),
    }
}

async fn method_not_allowed() -> ApiError {
    ApiError::MethodNotAllowed
}

/// One log line and the metrics of each request.
async fn observe(State(state): State<AppState>, request: Request, next: Next) -> Response {
    let start = Instant::now();
    let route = request
        .extensions()
        .get::<MatchedPath>()
        .map_or_else(|| "unmatched".to_string(), |m| m.as_str().to_string());
    let method = request.method().clone();
    let uri = request.uri().clone();
    let response = next.run(request).await;
    let latency = start.elapsed();
    let status = response.status();
    state.metrics.observe(&route, status.as_u16(), latency);
    tracing::info!(
        method = %method,
        route = %route,
        uri = %uri,
        status = status.as_u16(),
        latency_ms = latency.as_secs_f64() * 1e3,
        "request"
    );
    response
}

/// Refuses a URI longer than [`crate::conn::MAX_URI_BYTES`] before anything parses it.
async fn limit_uri(request: Request, next: Next) -> Response {
    let len = request.uri().path_and_query().map_or(0, |pq| pq.as_str().len());
    if len > crate::conn::MAX_URI_BYTES {
        return ApiError::UriTooLong { len, max: crate::conn::MAX_URI_BYTES }.into_response();
    }
    next.run(request).await
}

/// Bearer tokens on `/v1/…`, when any are configured.
async fn authenticate(State(state): State<AppState>, request: Request, next: Next) -> Response {
    let tokens = &state.config.tokens;
    if tokens.is_empty() || !request.uri().path().starts_with("/v1/") {
        return next.run(request).await;
    }
    let given = request
        .headers()
        .get(header::AUTHORIZATION)
        .and_then(|v| v.to_str().ok())
        .and_then(|v| v.strip_prefix("Bearer "))
        .map(str::trim);
    match given {
        Some(token) if tokens.iter().any(|t| same(t.as_bytes(), token.as_bytes())) => {
            next.run(request).await
        }
        _ => ApiError::Unauthorized.into_response(),
    }
}

/// Compares without stopping at the first difference, so timing does not tell how much of
/// a token was right.
fn same(a: &[u8], b: &[u8]) -> bool {
    a.len() == b.len() && a.iter().zip(b).fold(0u8, |acc, (x, y)| acc | (x ^ y)) == 0
}

/// Looks at every dataset's file every `interval` and swaps in changed files; runs until
/// dropped.
pub async fn watch(state: AppState, interval: Duration) {
    let mut ticker = tokio::time::interval(interval);
    ticker.set_missed_tick_behavior(tokio::time::MissedTickBehavior::Delay);
    ticker.tick().await;
    loop {
        ticker.tick().await;
        let names: Vec<String> = state.catalog.names().map(str::to_string).collect();
        for name in names {
            let st = state.clone();
            let poll_name = name.clone();
            let outcome = tokio::task::spawn_blocking(move || st.catalog.poll(&poll_name)).await;
            match outcome {
                Ok(PollOutcome::Reloaded) => {
                    Metrics::add(&state.metrics.reloads, 1);
                    let file = state.dataset(&name).map(|l| l.file_name()).unwrap_or_default();
                    tracing::info!(dataset = %name, file = %file, "dataset reloaded");
                }
                Ok(PollOutcome::Failed(message)) => {
                    Metrics::add(&state.metrics.reload_failures, 1);
                    tracing::error!(
                        dataset = %name,
                        error = %message,
                        "dataset reload failed; the previous file keeps serving"
                    );
                }
                Ok(PollOutcome::Unchanged | PollOutcome::Settling) => {}
                Err(e) => tracing::error!(dataset = %name, error = %e, "dataset poll failed"),
            }
        }
    }
}

/// The warning logged when the service listens on `addr`, if other machines can reach it.
pub fn exposure_warning(addr: std::net::SocketAddr, tokens: bool) -> Option<String> {
    if addr.ip().is_loopback() {
        return None;
    }
    let guard = if tokens {
        "bearer tokens guard /v1/…; /healthz, /readyz, /metrics and /openapi.json are open"
    } else {
        "no bearer tokens are configured, so anyone who reaches the port can query every dataset"
    };
    Some(format!(
        "listening on {addr}, which other machines can reach (not loopback); {guard}; keep \
         the port off the public network or put a proxy with TLS in front"
    ))
}

/// Serves `state` on `listener` until `shutdown` completes, reloading changed files in the
/// background. Requests in flight at shutdown are finished. Logs a warning when the
/// listener's address is not a loopback one.
pub async fn run(
    listener: TcpListener,
    state: AppState,
    shutdown: impl Future<Output = ()> + Send + 'static,
) -> std::io::Result<()> {
    let addr = listener.local_addr()?;
    if let Some(warning) = exposure_warning(addr, !state.config.tokens.is_empty()) {
        tracing::warn!("{warning}");
    }
    let watcher = tokio::spawn(watch(state.clone(), state.config.reload_interval));
    let limit = Duration::from_secs_f64(state.config.limits.request_timeout_secs);
    let metrics = std::sync::Arc::clone(&state.metrics);
    let result = crate::conn::serve(listener, app(state), metrics, limit, shutdown).await;
    watcher.abort();
    result
}

/// Completes on SIGINT (Ctrl-C) or SIGTERM.
pub async fn shutdown_signal() {
    let ctrl_c = async {
        if tokio::signal::ctrl_c().await.is_err() {
            std::future::pending::<()>().await;
        }
    };
    #[cfg(unix)]
    let term = async {
        match tokio::signal::unix::signal(tokio::signal::unix::SignalKind::terminate()) {
            Ok(mut s) => {
                s.recv().await;
            }
            Err(_) => std::future::pending::<()>().await,
        }
    };
    #[cfg(not(unix))]
    let term = std::future::pending::<()>();
    tokio::select! {
        () = ctrl_c => tracing::info!("SIGINT received; finishing requests in flight"),
        () = term => tracing::info!("SIGTERM received; finishing requests in flight"),
    }
}

/// Why the service could not start or stopped with an error.
#[derive(Debug, Error)]
pub enum ServeError {
    /// The configuration was refused.
    #[error(transparent)]
    Config(#[from] ConfigError),
    /// The address could not be bound, or the runtime failed.
    #[error("{what}: {source}")]
    Io {
        /// What was being done.
        what: String,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
}

/// What `shearbox serve` was given.
#[derive(Debug, Clone, Default)]
pub struct ServeOptions {
    /// A TOML configuration file.
    pub config: Option<PathBuf>,
    /// `NAME=PATH_OR_GLOB` datasets, added to those of the file.
    pub data: Vec<String>,
    /// The address to listen on, overriding the file's.
    pub bind: Option<String>,
}

impl ServeOptions {
    /// The configuration these options describe (the demo dataset when none is given).
    pub fn config(&self) -> Result<ServeConfig, ConfigError> {
        let mut cfg = match &self.config {
            Some(path) => ServeConfig::from_file(path)?,
            None => ServeConfig::default(),
        };
        for arg in &self.data {
            cfg.add_data_arg(arg)?;
        }
        if let Some(bind) = &self.bind {
            cfg.bind = parse_bind(bind)?;
        }
        cfg.or_demo()
    }
}

/// Runs the service until SIGINT or SIGTERM: logs to standard error (level from
/// `SHEARBOX_LOG`, e.g. `debug`, default `info`), opens the datasets, binds, and prints
/// `listening on http://ADDR`.
pub fn serve_blocking(options: &ServeOptions) -> Result<(), ServeError> {
    crate::memory::limit_malloc_arenas();
    init_logging();
    let config = options.config()?;
    let runtime = tokio::runtime::Builder::new_multi_thread()
        .enable_all()
        .thread_name("shearbox-http")
        .build()
        .map_err(|source| ServeError::Io { what: "starting the runtime".into(), source })?;
    runtime.block_on(async move {
        let bind = config.bind;
        let state =
            tokio::task::spawn_blocking(move || AppState::new(config)).await.map_err(|e| {
                ServeError::Io {
                    what: "opening the datasets".into(),
                    source: std::io::Error::other(e),
                }
            })?;
        for status in state.catalog.status() {
            match (&status.file, &status.error) {
                (Some(file), _) => {
                    tracing::info!(dataset = %status.name, file = %file, "dataset loaded")
                }
                (None, Some(error)) => {
                    tracing::error!(dataset = %status.name, error = %error, "dataset not loaded")
                }
                (None, None) => {}
            }
        }
        let listener = TcpListener::bind(bind)
            .await
            .map_err(|source| ServeError::Io { what: format!("binding {bind}"), source })?;
        let addr = listener.local_addr().map_err(|source| ServeError::Io {
            what: "reading the bound address".into(),
            source,
        })?;
        tracing::info!(%addr, "listening on http://{addr}");
        run(listener, state, shutdown_signal())
            .await
            .map_err(|source| ServeError::Io { what: "serving".into(), source })?;
        tracing::info!("stopped");
        Ok(())
    })
}

fn init_logging() {
    let filter: tracing_subscriber::filter::Targets = std::env::var("SHEARBOX_LOG")
        .ok()
        .and_then(|s| s.parse().ok())
        .unwrap_or_else(|| "info".parse().expect("a valid filter"));
    use tracing_subscriber::layer::SubscriberExt;
    use tracing_subscriber::util::SubscriberInitExt;
    let _ = tracing_subscriber::registry()
        .with(
            tracing_subscriber::fmt::layer()
                .with_writer(std::io::stderr)
                .with_ansi(std::io::stderr().is_terminal())
                .with_target(false),
        )
        .with(filter)
        .try_init();
}
