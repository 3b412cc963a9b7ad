//! The pictures as routes: the hodograph of a box and the map of one layer, as SVG.
//!
//! A picture is a box query with a different last step: the request is parsed and checked
//! with the same helpers and errors as the JSON routes ([`crate::api`]), planned with
//! [`query::plan`], its inputs come from the same cache or read ([`crate::api`]'s inputs, on a
//! blocking thread behind the [`crate::state::WorkGate`]), the numbers from
//! [`query::diagnose`], and [`shearbox_render`] draws them. The finished SVG is cached and
//! tagged like a JSON answer, under its own canonical request.
//!
//! The map's box is optional (the dataset's whole grid); its arrows are decimated
//! ([`shearbox_render::default_stride`], or `stride`), and an explicit stride that would leave
//! more arrow cells than the service's grid limit (or [`shearbox_render::MAX_ARROWS`]) is
//! answered `413` with a stride that fits, as `/layer` does for its grid.

use axum::body::{Body, Bytes};
use axum::extract::{RawQuery, State};
use axum::http::{HeaderMap, HeaderValue, StatusCode, header};
use axum::response::{IntoResponse, Response};
use shearbox_render::{
    Caption, LayerField, MAX_ARROWS, MapOptions, RenderError, hodograph_svg, map_svg,
};

use crate::api::{
    DatasetName, cache_headers, cached_answer, etag, inputs, not_modified, params, parse_bbox,
    parse_hpa, parse_stride, parse_time,
};
use crate::catalog::Loaded;
use crate::error::ApiError;
use crate::query::{self, Plan, ProfileRequest};
use crate::state::AppState;
use crate::wire::ErrorDoc;

/// The content type of the pictures (SVG 1.1, Appendix A.1).
pub const SVG_CONTENT_TYPE: &str = "image/svg+xml";

/// Which picture.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Picture {
    Hodograph,
    Map { stride: Option<usize> },
}

/// The hodograph of a box: box-mean geostrophic wind at each level, joined bottom to top by
/// each layer's thermal wind, coloured by the sign of its thermal advection.
#[utoipa::path(get, path = "/v1/datasets/{name}/hodograph.svg", tag = "pictures",
    params(
        ("name" = String, Path, description = "The dataset's name, as configured", example = "demo"),
        ("bbox" = String, Query, description = "W,S,E,N in degrees (GeoJSON order); W > E crosses the antimeridian", example = "-30,42,-10,56"),
        ("time" = Option<String>, Query, description = "ISO 8601 time or `latest` (the default)")),
    responses(
        (status = 200, description = "The hodograph, an SVG document", body = String, content_type = "image/svg+xml"),
        (status = 304, description = "Unchanged since the tag sent in If-None-Match"),
        (status = 400, description = "A malformed box, a box with no cells, a time not in the dataset, an unknown parameter", body = ErrorDoc),
        (status = 404, description = "No dataset of that name", body = ErrorDoc),
        (status = 503, description = "Too many requests waiting (Retry-After), the time limit, or the dataset unavailable", body = ErrorDoc)))]
pub async fn hodograph(
    State(state): State<AppState>,
    DatasetName(name): DatasetName,
    headers: HeaderMap,
    RawQuery(raw): RawQuery,
) -> Result<Response, ApiError> {
    let p = params(raw.as_deref(), &["bbox", "time"])?;
    let request = ProfileRequest { bbox: parse_bbox(&p)?, time: parse_time(&p)?, layer: None };
    picture(state, name, &headers, request, Picture::Hodograph).await
}

/// The map of one layer: thickness contours, thermal-wind arrows, baroclinic zones shaded by
/// the temperature gradient.
#[utoipa::path(get, path = "/v1/datasets/{name}/map.svg", tag = "pictures",
    params(
        ("name" = String, Path, description = "The dataset's name, as configured", example = "demo"),
        ("bottom" = f64, Query, description = "Bottom level, hPa (a level of the dataset)", example = 1000),
        ("top" = f64, Query, description = "Top level, hPa (a level of the dataset)", example = 500),
        ("bbox" = Option<String>, Query, description = "W,S,E,N in degrees (GeoJSON order); W > E crosses the antimeridian; default: the whole grid", example = "-30,42,-10,56"),
        ("time" = Option<String>, Query, description = "ISO 8601 time or `latest` (the default)"),
        ("stride" = Option<usize>, Query, description = "An arrow every Nth row and column (default: about 25 along the longer side)")),
    responses(
        (status = 200, description = "The layer map, an SVG document", body = String, content_type = "image/svg+xml"),
        (status = 304, description = "Unchanged since the tag sent in If-None-Match"),
        (status = 400, description = "A malformed request, levels not in the dataset, stride 0, an unknown parameter", body = ErrorDoc),
        (status = 404, description = "No dataset of that name", body = ErrorDoc),
        (status = 413, description = "The stride leaves more arrows than the limit; `stride` in the error fits", body = ErrorDoc),
        (status = 503, description = "Too many requests waiting (Retry-After), the time limit, or the dataset unavailable", body = ErrorDoc)))]
pub async fn map(
    State(state): State<AppState>,
    DatasetName(name): DatasetName,
    headers: HeaderMap,
    RawQuery(raw): RawQuery,
) -> Result<Response, ApiError> {
    let p = params(raw.as_deref(), &["bottom", "top", "bbox", "time", "stride"])?;
    let (bottom, top) = (parse_hpa(&p, "bottom")?, parse_hpa(&p, "top")?);
    let bbox = if p.contains_key("bbox") {
        parse_bbox(&p)?
    } else {
        query::whole_grid_bbox(state.dataset(&name)?.dataset.grid())
    };
    let stride = p.contains_key("stride").then(|| parse_stride(&p)).transpose()?;
    let request = ProfileRequest { bbox, time: parse_time(&p)?, layer: Some((bottom, top)) };
    picture(state, name, &headers, request, Picture::Map { stride }).await
}

/// Plans, tags, and answers a picture from the cache or the work gate.
async fn picture(
    state: AppState,
    name: String,
    headers: &HeaderMap,
    request: ProfileRequest,
    picture: Picture,
) -> Result<Response, ApiError> {
    let loaded = state.dataset(&name)?;
    let plan =
        query::plan(&loaded.dataset, &request).map_err(|e| ApiError::from_query(&name, e))?;
    if let Picture::Map { stride: Some(stride) } = picture {
        let (rows, cols) = (plan.selection.rows.len(), plan.selection.cols.len);
        let cells = query::decimated_cells(rows, cols, stride);
        let max = state.config.limits.max_grid_cells.min(MAX_ARROWS);
        if cells > max {
            let fits = query::fitting_stride(rows, cols, stride, max);
            return Err(ApiError::TooManyCells {
                message: format!(
                    "the box holds {rows} x {cols} cells; at stride {stride} the map has {cells} \
                     arrow cells, over the limit of {max}; use stride={fits}, leave stride out \
                     for about 25 arrows a side, or a smaller box"
                ),
                stride: fits,
            });
        }
    }
    let b = &request.bbox;
    let canonical = format!(
        "{picture:?}|{}|{}|{}|{}|{}|t{}|{:?}",
        name, b.west, b.south, b.east, b.north, plan.time_idx, request.layer
    );
    let tag = etag(loaded.fingerprint.tag(), &canonical);
    if not_modified(headers, &tag) {
        return Ok(svg_response(&state, &tag, None));
    }
    let generation = loaded.generation;
    let worker = state.clone();
    let body = cached_answer(&state, generation, canonical, move || {
        draw(&worker, &loaded, &request, &plan, picture)
    })
    .await?;
    Ok(svg_response(&state, &tag, Some(body)))
}

/// An SVG answer with its tag, or `304` without a body.
fn svg_response(state: &AppState, tag: &str, body: Option<Bytes>) -> Response {
    let mut response = match body {
        None => StatusCode::NOT_MODIFIED.into_response(),
        Some(body) => {
            let mut r = Response::new(Body::from(body));
            r.headers_mut()
                .insert(header::CONTENT_TYPE, HeaderValue::from_static(SVG_CONTENT_TYPE));
            r
        }
    };
    cache_headers(&mut response, tag, state.config.cache_max_age_secs);
    response
}

/// Reads (or reuses) the inputs, computes, and draws. Runs on a blocking thread.
fn draw(
    state: &AppState,
    loaded: &Loaded,
    request: &ProfileRequest,
    plan: &Plan,
    picture: Picture,
) -> Result<Bytes, ApiError> {
    let fields = inputs(state, loaded, plan)?;
    let (profile, diag) = query::diagnose(request, plan, &fields, &state.kernel)
        .map_err(|e| ApiError::from_query(&loaded.name, e))?;
    let time = loaded.dataset.times().get(plan.time_idx).map_or("", String::as_str);
    let caption = Caption { dataset: &loaded.name, time, caution: crate::CAUTION };
    let svg = match picture {
        Picture::Hodograph => hodograph_svg(&profile, &caption),
        Picture::Map { stride } => {
            let layer =
                diag.layers.first().ok_or_else(|| ApiError::internal("no layer was computed"))?;
            let (rows, cols) = query::box_in_block(plan);
            LayerField::from_diagnostics(fields.grid(), fields.levels(), layer)
                .and_then(|block| block.select(rows, &cols))
                .and_then(|field| {
                    let options = MapOptions { stride, ..MapOptions::default() };
                    map_svg(&field, &caption, &options)
                })
        }
    }
    .map_err(render_error)?;
    Ok(Bytes::from(svg))
}

/// A picture that could not be drawn: an option the request set, or a fault of ours.
fn render_error(e: RenderError) -> ApiError {
    match e {
        RenderError::BadOption { .. } => ApiError::bad("invalid_parameter", e.to_string()),
        RenderError::TooManyArrows { fits, .. } => {
            ApiError::TooManyCells { message: e.to_string(), stride: fits }
        }
        other => ApiError::internal(format!("drawing a picture: {other}")),
    }
}
