//! The handlers. Each is annotated with its OpenAPI description, and the router is built from
//! those annotations ([`crate::app`]), so `/openapi.json` lists exactly the routes served.
//!
//! A box query is planned on the request's task (metadata only, no I/O), answered from the
//! cache when it can be, and otherwise read and computed on a blocking thread behind the
//! [`crate::state::WorkGate`]. Answers carry a weak entity tag made of the file's fingerprint
//! and the canonical request, so a dashboard that polls with `If-None-Match` gets `304` without
//! any work until the file is replaced.

use std::collections::BTreeMap;
use std::sync::Arc;
use std::time::Duration;

use axum::body::{Body, Bytes};
use axum::extract::{FromRequestParts, Path, RawQuery, State};
use axum::http::request::Parts;
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use serde::Serialize;
use shearbox_cf::{CfError, TimeSelector};
use shearbox_core::{BBox, Fields};

use crate::cache::{CacheKey, Cached, fields_bytes};
use crate::catalog::{Fnv, Loaded};
use crate::error::ApiError;
use crate::metrics::Metrics;
use crate::query::{self, Plan, ProfileRequest};
use crate::state::AppState;
use crate::wire::{
    DatasetDoc, DatasetListDoc, DatasetSummaryDoc, ErrorDoc, HealthDoc, LayerResponseDoc,
    ProfileDoc, ReadyDoc,
};

/// The `{name}` of a dataset route; a name that is not valid UTF-8 gets a JSON 400 like every
/// other malformed request.
pub struct DatasetName(pub String);

impl<S: Send + Sync> FromRequestParts<S> for DatasetName {
    type Rejection = ApiError;

    async fn from_request_parts(parts: &mut Parts, state: &S) -> Result<Self, ApiError> {
        Path::<String>::from_request_parts(parts, state)
            .await
            .map(|Path(n)| DatasetName(n))
            .map_err(|e| {
                ApiError::bad(
                    "invalid_parameter",
                    format!("the dataset name in the path is malformed: {}", e.body_text()),
                )
            })
    }
}

/// The query parameters of a request, checked against the ones its route takes.
pub(crate) fn params(
    raw: Option<&str>,
    allowed: &[&str],
) -> Result<BTreeMap<String, String>, ApiError> {
    let pairs: Vec<(String, String)> =
        serde_urlencoded::from_str(raw.unwrap_or("")).map_err(|e| {
            ApiError::bad("invalid_query", format!("the query string is malformed: {e}"))
        })?;
    let mut out = BTreeMap::new();
    for (key, value) in pairs {
        if !allowed.contains(&key.as_str()) {
            return Err(ApiError::bad(
                "unknown_parameter",
                format!("unknown parameter {key:?}; this route takes: {}", allowed.join(", ")),
            ));
        }
        if out.insert(key.clone(), value).is_some() {
            return Err(ApiError::bad(
                "duplicate_parameter",
                format!("parameter {key:?} is given more than once"),
            ));
        }
    }
    Ok(out)
}

pub(crate) fn parse_bbox(p: &BTreeMap<String, String>) -> Result<BBox, ApiError> {
    let text = p.get("bbox").ok_or_else(|| {
        ApiError::bad(
            "missing_parameter",
            "bbox is required: W,S,E,N in degrees (GeoJSON order), e.g. bbox=-30,42,-10,56",
        )
    })?;
    BBox::parse(text).map_err(ApiError::from_core)
}

pub(crate) fn parse_time(p: &BTreeMap<String, String>) -> Result<TimeSelector, ApiError> {
    match p.get("time") {
        None => Ok(TimeSelector::Latest),
        Some(t) => TimeSelector::parse(t).map_err(|e| ApiError::bad("invalid_time", e.to_string())),
    }
}

pub(crate) fn parse_hpa(p: &BTreeMap<String, String>, key: &str) -> Result<f64, ApiError> {
    let text = p.get(key).ok_or_else(|| {
        ApiError::bad(
            "missing_parameter",
            format!("{key} is required: a pressure level in hPa, e.g. bottom=1000&top=500"),
        )
    })?;
    text.trim().parse::<f64>().ok().filter(|v| v.is_finite()).ok_or_else(|| {
        ApiError::bad("invalid_parameter", format!("{key}={text:?} is not a number of hPa"))
    })
}

fn parse_grid(p: &BTreeMap<String, String>) -> Result<bool, ApiError> {
    match p.get("grid").map(String::as_str) {
        None | Some("false") | Some("0") => Ok(false),
        Some("true") | Some("1") => Ok(true),
        Some(other) => {
            Err(ApiError::bad("invalid_parameter", format!("grid={other:?} is not true or false")))
        }
    }
}

pub(crate) fn parse_stride(p: &BTreeMap<String, String>) -> Result<usize, ApiError> {
    let Some(text) = p.get("stride") else { return Ok(1) };
    match text.trim().parse::<usize>() {
        Ok(s) if s >= 1 => Ok(s),
        _ => Err(ApiError::bad(
            "invalid_stride",
            format!(
                "stride={text:?}: give a whole number of at least 1 (every Nth row and column)"
            ),
        )),
    }
}

/// A weak entity tag from a file fingerprint and the canonical form of what was asked.
pub(crate) fn etag(file_tag: u64, canonical: &str) -> String {
    let mut h = Fnv::default();
    h.write(canonical.as_bytes());
    format!("W/\"{file_tag:016x}-{:016x}\"", h.finish())
}

/// Whether `If-None-Match` names `tag` (weak comparison, RFC 9110 §13.1.2).
pub(crate) fn not_modified(headers: &HeaderMap, tag: &str) -> bool {
    let strip = |t: &str| t.trim().trim_start_matches("W/").to_string();
    headers
        .get_all(header::IF_NONE_MATCH)
        .iter()
        .filter_map(|v| v.to_str().ok())
        .any(|v| v.split(',').any(|t| t.trim() == "*" || strip(t) == strip(tag)))
}

pub(crate) fn cache_headers(response: &mut Response, tag: &str, max_age: u64) {
    let headers = response.headers_mut();
    if let Ok(v) = HeaderValue::from_str(tag) {
        headers.insert(header::ETAG, v);
    }
    if let Ok(v) = HeaderValue::from_str(&format!("public, max-age={max_age}")) {
        headers.insert(header::CACHE_CONTROL, v);
    }
}

/// A JSON answer with its tag, or `304` when the client has it already.
fn tagged(
    state: &AppState,
    headers: &HeaderMap,
    tag: &str,
    body: impl FnOnce() -> Result<Bytes, ApiError>,
) -> Result<Response, ApiError> {
    let mut response = if not_modified(headers, tag) {
        StatusCode::NOT_MODIFIED.into_response()
    } else {
        json_bytes(body()?)
    };
    cache_headers(&mut response, tag, state.config.cache_max_age_secs);
    Ok(response)
}

fn json_bytes(body: Bytes) -> Response {
    let mut r = Response::new(Body::from(body));
    r.headers_mut().insert(header::CONTENT_TYPE, HeaderValue::from_static("application/json"));
    r
}

/// The JSON text of `doc`, in a buffer of its own length: answers are kept in the cache,
/// which counts their length, and the serialiser's buffer grows by doubling.
fn to_json<T: Serialize>(doc: &T) -> Result<Bytes, ApiError> {
    let mut text = serde_json::to_vec(doc).map_err(ApiError::internal)?;
    text.shrink_to_fit();
    Ok(Bytes::from(text))
}

/// Liveness: the process answers.
#[utoipa::path(get, path = "/healthz", tag = "service",
    responses((status = 200, description = "The service is alive", body = HealthDoc)))]
pub async fn healthz() -> Response {
    let mut r = axum::Json(HealthDoc { status: "ok".into() }).into_response();
    r.headers_mut().insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    r
}

/// Readiness: every dataset loaded, with any that failed and why.
#[utoipa::path(get, path = "/readyz", tag = "service",
    responses(
        (status = 200, description = "Every dataset is serving", body = ReadyDoc),
        (status = 503, description = "A dataset has no file loaded", body = ReadyDoc)))]
pub async fn readyz(State(state): State<AppState>) -> Response {
    let datasets = state.catalog.status();
    let ready = datasets.iter().all(|d| d.serving);
    let status = if ready { StatusCode::OK } else { StatusCode::SERVICE_UNAVAILABLE };
    let mut r = (status, axum::Json(ReadyDoc { ready, datasets })).into_response();
    r.headers_mut().insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    r
}

/// Metrics in the Prometheus text format.
#[utoipa::path(get, path = "/metrics", tag = "service",
    responses((status = 200, description = "Prometheus text exposition format 0.0.4",
        body = String, content_type = "text/plain")))]
pub async fn metrics(State(state): State<AppState>) -> Response {
    let (bytes, entries) = state.cache.usage();
    let text = state.metrics.render(&[
        ("shearbox_cache_bytes", "Bytes held by the cache.", bytes as f64),
        ("shearbox_cache_entries", "Entries held by the cache.", entries as f64),
        ("shearbox_cache_capacity_bytes", "Capacity of the cache.", state.cache.capacity() as f64),
        (
            "shearbox_work_in_flight",
            "Box queries running or waiting.",
            state.gate.in_flight() as f64,
        ),
    ]);
    let mut r = text.into_response();
    r.headers_mut().insert(
        header::CONTENT_TYPE,
        HeaderValue::from_static("text/plain; version=0.0.4; charset=utf-8"),
    );
    r.headers_mut().insert(header::CACHE_CONTROL, HeaderValue::from_static("no-store"));
    r
}

/// This OpenAPI 3.1 document, generated from the handlers.
#[utoipa::path(get, path = "/openapi.json", tag = "service",
    responses((status = 200, description = "The OpenAPI 3.1 document of this service",
        body = Object, content_type = "application/json")))]
pub async fn openapi_json(State(state): State<AppState>) -> Result<Response, ApiError> {
    let body =
        state.openapi.get().cloned().ok_or_else(|| ApiError::internal("no OpenAPI document"))?;
    Ok(json_bytes(body))
}

/// The datasets the service offers.
#[utoipa::path(get, path = "/v1/datasets", tag = "datasets",
    responses(
        (status = 200, description = "Every configured dataset", body = DatasetListDoc),
        (status = 304, description = "Unchanged since the tag sent in If-None-Match"),
        (status = 401, description = "A bearer token is required", body = ErrorDoc)))]
pub async fn list_datasets(
    State(state): State<AppState>,
    headers: HeaderMap,
    RawQuery(raw): RawQuery,
) -> Result<Response, ApiError> {
    params(raw.as_deref(), &[])?;
    let mut summaries = Vec::new();
    let mut h = Fnv::default();
    for name in state.catalog.names() {
        let loaded = state.dataset(name).ok();
        h.write(name.as_bytes());
        h.write(&loaded.as_ref().map_or(0, |l| l.fingerprint.tag()).to_le_bytes());
        summaries.push(DatasetSummaryDoc {
            name: name.to_string(),
            available: loaded.is_some(),
            href: format!("/v1/datasets/{name}"),
            levels_hpa: loaded.as_ref().map(|l| l.doc.levels_hpa.clone()).unwrap_or_default(),
            times: loaded.as_ref().map(|l| l.doc.times.clone()),
        });
    }
    let tag = etag(h.finish(), "datasets");
    tagged(&state, &headers, &tag, || {
        to_json(&DatasetListDoc { datasets: summaries, caution: crate::CAUTION.into() })
    })
}

/// One dataset: grid, levels, times, recognised variables and possible diagnostics.
#[utoipa::path(get, path = "/v1/datasets/{name}", tag = "datasets",
    params(("name" = String, Path, description = "The dataset's name, as configured", example = "demo")),
    responses(
        (status = 200, description = "The dataset document", body = DatasetDoc),
        (status = 304, description = "Unchanged since the tag sent in If-None-Match"),
        (status = 400, description = "An unknown parameter", body = ErrorDoc),
        (status = 404, description = "No dataset of that name", body = ErrorDoc),
        (status = 503, description = "The dataset could not be loaded", body = ErrorDoc)))]
pub async fn get_dataset(
    State(state): State<AppState>,
    DatasetName(name): DatasetName,
    headers: HeaderMap,
    RawQuery(raw): RawQuery,
) -> Result<Response, ApiError> {
    params(raw.as_deref(), &[])?;
    let loaded = state.dataset(&name)?;
    let tag = etag(loaded.fingerprint.tag(), &format!("dataset|{name}"));
    tagged(&state, &headers, &tag, || to_json(&loaded.doc))
}

/// Box-mean profile of every adjacent layer: the same document as `shearbox profile`.
#[utoipa::path(get, path = "/v1/datasets/{name}/profile", tag = "queries",
    params(
        ("name" = String, Path, description = "The dataset's name, as configured", example = "demo"),
        ("bbox" = String, Query, description = "W,S,E,N in degrees (GeoJSON order); W > E crosses the antimeridian", example = "-30,42,-10,56"),
        ("time" = Option<String>, Query, description = "ISO 8601 time or `latest` (the default)")),
    responses(
        (status = 200, description = "The profile document", body = ProfileDoc),
        (status = 304, description = "Unchanged since the tag sent in If-None-Match"),
        (status = 400, description = "A malformed box, a box with no cells, a time not in the dataset, an unknown parameter", body = ErrorDoc),
        (status = 404, description = "No dataset of that name", body = ErrorDoc),
        (status = 503, description = "Too many requests waiting (Retry-After), the time limit, or the dataset unavailable", body = ErrorDoc)))]
pub async fn profile(
    State(state): State<AppState>,
    DatasetName(name): DatasetName,
    headers: HeaderMap,
    RawQuery(raw): RawQuery,
) -> Result<Response, ApiError> {
    let p = params(raw.as_deref(), &["bbox", "time"])?;
    let request = ProfileRequest { bbox: parse_bbox(&p)?, time: parse_time(&p)?, layer: None };
    box_query(state, name, &headers, request, None).await
}

/// One deep layer between two levels, optionally with its values on the grid.
#[utoipa::path(get, path = "/v1/datasets/{name}/layer", tag = "queries",
    params(
        ("name" = String, Path, description = "The dataset's name, as configured", example = "demo"),
        ("bottom" = f64, Query, description = "Bottom level, hPa (a level of the dataset)", example = 1000),
        ("top" = f64, Query, description = "Top level, hPa (a level of the dataset)", example = 500),
        ("bbox" = String, Query, description = "W,S,E,N in degrees (GeoJSON order); W > E crosses the antimeridian", example = "-30,42,-10,56"),
        ("time" = Option<String>, Query, description = "ISO 8601 time or `latest` (the default)"),
        ("grid" = Option<bool>, Query, description = "Also give the layer's thickness and thermal wind on the grid"),
        ("stride" = Option<usize>, Query, description = "With grid=true: every Nth row and column (default 1)")),
    responses(
        (status = 200, description = "The profile document with one layer, and the grid when asked", body = LayerResponseDoc),
        (status = 304, description = "Unchanged since the tag sent in If-None-Match"),
        (status = 400, description = "A malformed request, levels not in the dataset, stride 0, an unknown parameter", body = ErrorDoc),
        (status = 404, description = "No dataset of that name", body = ErrorDoc),
        (status = 413, description = "The grid would exceed the cell limit; `stride` in the error fits", body = ErrorDoc),
        (status = 503, description = "Too many requests waiting (Retry-After), the time limit, or the dataset unavailable", body = ErrorDoc)))]
pub async fn layer(
    State(state): State<AppState>,
    DatasetName(name): DatasetName,
    headers: HeaderMap,
    RawQuery(raw): RawQuery,
) -> Result<Response, ApiError> {
    let p = params(raw.as_deref(), &["bottom", "top", "bbox", "time", "grid", "stride"])?;
    let (bottom, top) = (parse_hpa(&p, "bottom")?, parse_hpa(&p, "top")?);
    let request =
        ProfileRequest { bbox: parse_bbox(&p)?, time: parse_time(&p)?, layer: Some((bottom, top)) };
    let stride = parse_stride(&p)?;
    let grid = parse_grid(&p)?.then_some(stride);
    box_query(state, name, &headers, request, grid).await
}

/// Plans, tags, and answers a box query from the cache or the work gate.
async fn box_query(
    state: AppState,
    name: String,
    headers: &HeaderMap,
    request: ProfileRequest,
    grid: Option<usize>,
) -> Result<Response, ApiError> {
    let loaded = state.dataset(&name)?;
    let plan =
        query::plan(&loaded.dataset, &request).map_err(|e| ApiError::from_query(&name, e))?;
    if let Some(stride) = grid {
        let (rows, cols) = (plan.selection.rows.len(), plan.selection.cols.len);
        let cells = query::decimated_cells(rows, cols, stride);
        let max = state.config.limits.max_grid_cells;
        if cells > max {
            let fits = query::fitting_stride(rows, cols, stride, max);
            return Err(ApiError::TooManyCells {
                message: format!(
                    "the box holds {rows} x {cols} cells; at stride {stride} the grid has {cells} \
                     cells, over the limit of {max}; use stride={fits} or a smaller box"
                ),
                stride: fits,
            });
        }
    }
    let b = &request.bbox;
    let canonical = format!(
        "{}|{}|{}|{}|{}|t{}|{:?}|{:?}",
        name, b.west, b.south, b.east, b.north, plan.time_idx, request.layer, grid
    );
    let tag = etag(loaded.fingerprint.tag(), &canonical);
    if not_modified(headers, &tag) {
        return tagged(&state, headers, &tag, || Ok(Bytes::new()));
    }
    let generation = loaded.generation;
    let worker = state.clone();
    let body = cached_answer(&state, generation, canonical, move || {
        answer(&worker, &loaded, &request, &plan, grid)
    })
    .await?;
    tagged(&state, headers, &tag, || Ok(body))
}

/// The answer kept under `canonical` in the cache, or made by `work` on a blocking thread
/// through the work gate and then kept.
pub(crate) async fn cached_answer<F>(
    state: &AppState,
    generation: u64,
    canonical: String,
    work: F,
) -> Result<Bytes, ApiError>
where
    F: FnOnce() -> Result<Bytes, ApiError> + Send + 'static,
{
    let key = CacheKey::Answer { generation, request: canonical };
    if let Some(Cached::Answer(body)) = state.cache.get(&key) {
        Metrics::add(&state.metrics.cache_hits, 1);
        return Ok(body);
    }
    Metrics::add(&state.metrics.cache_misses, 1);
    let timeout = Duration::from_secs_f64(state.config.limits.request_timeout_secs);
    let body = state.gate.run(timeout, work).await.inspect_err(|e| {
        if *e == ApiError::Overloaded {
            Metrics::add(&state.metrics.rejected, 1);
        }
    })??;
    state.cache.insert(key, Cached::Answer(body.clone()));
    Ok(body)
}

/// The inputs of a plan, from the cache or the file. Runs on a blocking thread.
pub(crate) fn inputs(
    state: &AppState,
    loaded: &Loaded,
    plan: &Plan,
) -> Result<Arc<Fields>, ApiError> {
    let step_bytes = loaded.dataset.values_per_step().saturating_mul(4);
    if step_bytes <= state.cache.capacity() / STEP_SHARE {
        let step = whole_step(state, loaded, plan.time_idx)?;
        return Ok(Arc::new(step.subset(&plan.block)));
    }
    let key = CacheKey::Inputs {
        generation: loaded.generation,
        time_idx: plan.time_idx,
        rows: (plan.block.rows.start, plan.block.rows.end),
        cols: (plan.block.cols.start, plan.block.cols.len),
    };
    if let Some(fields) = cached_inputs(state, &key) {
        return Ok(fields);
    }
    Metrics::add(&state.metrics.cache_misses, 1);
    let fields = query::read_inputs(&loaded.dataset, plan).map_err(|e| read_failure(loaded, e))?;
    let fields = Arc::new(checked_read(state, loaded, fields)?);
    state.cache.insert(key, Cached::Inputs(Arc::clone(&fields)));
    Ok(fields)
}

/// A time step at most this fraction of the cache is read and kept whole, and boxes are cut
/// from it. Files are commonly chunked by whole levels, so that reading any box of a step
/// inflates every chunk of the step anyway: reading it once whole makes every later box of
/// that step a copy, and keeps the netCDF thread free. Larger steps are read box by box.
const STEP_SHARE: usize = 4;

/// The decoded inputs of time step `time_idx`, from the cache or read whole (once, however
/// many requests want it at the same moment).
fn whole_step(state: &AppState, loaded: &Loaded, time_idx: usize) -> Result<Arc<Fields>, ApiError> {
    let key = CacheKey::Step { generation: loaded.generation, time_idx };
    if let Some(fields) = cached_inputs(state, &key) {
        return Ok(fields);
    }
    let _one_reader = loaded.step_reads.lock().unwrap_or_else(std::sync::PoisonError::into_inner);
    // Another request may have read the step while this one waited for the lock.
    if let Some(fields) = cached_inputs(state, &key) {
        return Ok(fields);
    }
    Metrics::add(&state.metrics.cache_misses, 1);
    let fields = loaded
        .dataset
        .read_fields(time_idx, None)
        .map_err(|e| read_failure(loaded, query::QueryError::from(e)))?;
    let fields = Arc::new(checked_read(state, loaded, fields)?);
    state.cache.insert(key, Cached::Inputs(Arc::clone(&fields)));
    Ok(fields)
}

/// Decoded inputs kept under `key`, counted as a cache hit when found.
fn cached_inputs(state: &AppState, key: &CacheKey) -> Option<Arc<Fields>> {
    let Some(Cached::Inputs(fields)) = state.cache.get(key) else { return None };
    Metrics::add(&state.metrics.cache_hits, 1);
    Some(fields)
}

/// `fields` as read, unless the file was rewritten in place meanwhile; counts the bytes.
fn checked_read(state: &AppState, loaded: &Loaded, fields: Fields) -> Result<Fields, ApiError> {
    // Checked after the read, so that a rewrite during it is caught too.
    if loaded.changed_in_place() {
        let file = loaded.file_name();
        tracing::error!(
            dataset = %loaded.name,
            file = %file,
            "the served file was rewritten in place; its values are not served until a good \
             file replaces it (write new files aside and rename them over the old)"
        );
        return Err(ApiError::Unavailable {
            dataset: loaded.name.clone(),
            reason: format!(
                "{file} was rewritten in place while served; retry once a good file is in place"
            ),
        });
    }
    Metrics::add(&state.metrics.bytes_read, fields_bytes(&fields) as u64);
    Ok(fields)
}

/// A failed read of a file that opened and validated: the file changed under the service
/// (rewritten or truncated in place) or the disk failed. Answered as 503 naming the file
/// without its folder, logged in full; the next good file clears it.
fn read_failure(loaded: &Loaded, e: query::QueryError) -> ApiError {
    let query::QueryError::Data(cf) = e else { return ApiError::from_query(&loaded.name, e) };
    if matches!(*cf, CfError::TimeNotFound { .. } | CfError::BadTimeSelector { .. }) {
        return ApiError::from_query(&loaded.name, query::QueryError::Data(cf));
    }
    let file = loaded.file_name();
    let full = loaded.fingerprint.path.display().to_string();
    let message = cf.to_string().replace(&full, &file);
    tracing::error!(
        dataset = %loaded.name,
        file = %file,
        error = %message,
        "reading the served file failed; was it changed in place? replace files by renaming \
         a new one over them"
    );
    ApiError::Unavailable {
        dataset: loaded.name.clone(),
        reason: format!("reading {file} failed ({message}); retry once a good file is in place"),
    }
}

/// Reads (or reuses) the inputs, computes, and serialises. Runs on a blocking thread.
fn answer(
    state: &AppState,
    loaded: &Loaded,
    request: &ProfileRequest,
    plan: &Plan,
    grid: Option<usize>,
) -> Result<Bytes, ApiError> {
    let fields = inputs(state, loaded, plan)?;
    let (doc, diag) =
        query::evaluate(&loaded.name, &loaded.dataset, request, plan, &fields, &state.kernel)
            .map_err(|e| ApiError::from_query(&loaded.name, e))?;
    if request.layer.is_none() {
        return to_json(&doc);
    }
    let grid = grid.and_then(|stride| query::gridded_layer(&fields, &diag, plan, stride));
    to_json(&LayerResponseDoc { profile: doc, grid })
}
