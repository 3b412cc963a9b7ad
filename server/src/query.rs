//! The box query: a dataset, a box, a time and optionally one layer in, a profile out.
//!
//! Only the box and its one-cell halo are read, at one time step; the halo makes every
//! value in the box equal to what the whole grid would give (the kernel's invariant).
//!
//! The query runs in three steps that the command line ([`profile`]) chains directly and the
//! service runs with a cache between them: [`plan`] checks the request against the dataset's
//! metadata (no I/O), [`read_inputs`] reads the box plus halo at the planned time, and
//! [`evaluate`] computes the diagnostics and the document. Both edges therefore produce their
//! numbers through the same code.

use std::ops::Range;

use shearbox_cf::{CfError, Dataset, TimeSelector};
use shearbox_core::{
    BBox, BoxProfile, Config, CoreError, Diagnostics, Fields, Grid, Layer, Selection, box_profile,
    compute,
};
use thiserror::Error;

use crate::wire::{GridValuesDoc, ProfileDoc};

/// Why a box query failed.
#[derive(Debug, Error)]
pub enum QueryError {
    /// The request was malformed or names something the dataset lacks.
    #[error(transparent)]
    Request(#[from] CoreError),
    /// The file could not be read, or the time is not in it.
    #[error(transparent)]
    Data(Box<CfError>),
}

impl From<CfError> for QueryError {
    fn from(e: CfError) -> Self {
        Self::Data(Box::new(e))
    }
}

/// What to compute.
#[derive(Debug, Clone, PartialEq)]
pub struct ProfileRequest {
    /// The box.
    pub bbox: BBox,
    /// The time.
    pub time: TimeSelector,
    /// One deep layer `(bottom_hpa, top_hpa)`, or every adjacent layer when `None`.
    pub layer: Option<(f64, f64)>,
}

/// A request checked against a dataset: what to read and what to compute.
#[derive(Debug, Clone, PartialEq)]
pub struct Plan {
    /// The layers to compute, bottom-up.
    pub layers: Vec<Layer>,
    /// The grid cells inside the box.
    pub selection: Selection,
    /// The block to read: the box plus its one-cell halo.
    pub block: Selection,
    /// The time step, file order.
    pub time_idx: usize,
}

/// Checks `request` against the dataset's levels, grid and times. Reads nothing.
pub fn plan(ds: &Dataset, request: &ProfileRequest) -> Result<Plan, QueryError> {
    let levels = ds.levels();
    let layers = match request.layer {
        Some((bottom, top)) => vec![levels.layer(bottom, top)?],
        None => levels.adjacent_layers(),
    };
    let grid = ds.grid();
    let selection = grid.select_box(&request.bbox)?;
    let block = selection.with_halo(grid.n_lat());
    let time_idx = ds.time_index(&request.time)?;
    Ok(Plan { layers, selection, block, time_idx })
}

/// Reads the planned block (box plus halo) at the planned time.
pub fn read_inputs(ds: &Dataset, plan: &Plan) -> Result<Fields, QueryError> {
    Ok(ds.read_fields(plan.time_idx, Some(&plan.block))?)
}

/// The diagnostics of the planned layers on the block, and the profile document of the box.
pub fn evaluate(
    name: &str,
    ds: &Dataset,
    request: &ProfileRequest,
    plan: &Plan,
    fields: &Fields,
    cfg: &Config,
) -> Result<(ProfileDoc, Diagnostics), QueryError> {
    let (profile, diag) = diagnose(request, plan, fields, cfg)?;
    // A file without a time coordinate has one step and no time text.
    let time = ds.times().get(plan.time_idx).map_or("", String::as_str);
    Ok((ProfileDoc::new(name, time, &request.bbox, &profile), diag))
}

/// The diagnostics of the planned layers on the block and the box-mean profile of the box:
/// the numbers behind the profile document ([`evaluate`]) and the pictures.
pub fn diagnose(
    request: &ProfileRequest,
    plan: &Plan,
    fields: &Fields,
    cfg: &Config,
) -> Result<(BoxProfile, Diagnostics), QueryError> {
    let diag = compute(fields, &plan.layers, cfg);
    let profile = box_profile(fields, &diag, &request.bbox)?;
    Ok((profile, diag))
}

/// Computes the profile document of `request` on `ds`, named `name` in the document.
pub fn profile(
    name: &str,
    ds: &Dataset,
    request: &ProfileRequest,
    cfg: &Config,
) -> Result<ProfileDoc, QueryError> {
    let plan = plan(ds, request)?;
    let fields = read_inputs(ds, &plan)?;
    Ok(evaluate(name, ds, request, &plan, &fields, cfg)?.0)
}

/// Number of rows and columns of a `rows` × `cols` block taken every `stride` cells.
pub fn decimated_cells(rows: usize, cols: usize, stride: usize) -> usize {
    rows.div_ceil(stride.max(1)) * cols.div_ceil(stride.max(1))
}

/// The smallest stride, at least `stride`, whose decimated `rows` × `cols` block holds at most
/// `max_cells` cells (`max_cells` ≥ 1).
pub fn fitting_stride(rows: usize, cols: usize, stride: usize, max_cells: usize) -> usize {
    let mut s = stride.max(1);
    while decimated_cells(rows, cols, s) > max_cells.max(1) {
        s += 1;
    }
    s
}

/// The first layer's thickness and thermal wind on the box cells of `fields` (the block
/// that `plan` read), every `stride`-th row and column from the box's south-west cell.
pub fn gridded_layer(
    fields: &Fields,
    diag: &Diagnostics,
    plan: &Plan,
    stride: usize,
) -> Option<GridValuesDoc> {
    let layer = diag.layers.first()?;
    let grid = fields.grid();
    let stride = stride.max(1);
    // The box cells are the selection's rows times its columns; find them in the block.
    let rows: Vec<usize> =
        plan.selection.rows.clone().map(|j| j - plan.block.rows.start).step_by(stride).collect();
    let block_cols: Vec<usize> = plan.block.col_indices().collect();
    let cols: Vec<usize> = plan
        .selection
        .col_indices()
        .filter_map(|c| block_cols.iter().position(|&b| b == c))
        .step_by(stride)
        .collect();
    let values = |a: &ndarray::Array2<f32>| -> Vec<Vec<Option<f32>>> {
        rows.iter()
            .map(|&j| {
                cols.iter()
                    .map(|&i| {
                        let v = a[[j, i]];
                        v.is_finite().then_some(v)
                    })
                    .collect()
            })
            .collect()
    };
    Some(GridValuesDoc {
        stride,
        lat: rows.iter().map(|&j| grid.lat()[j]).collect(),
        lon: cols.iter().map(|&i| grid.lon()[i]).collect(),
        thickness_m: values(&layer.thickness),
        thermal_wind_u_ms: values(&layer.thermal_wind_u),
        thermal_wind_v_ms: values(&layer.thermal_wind_v),
    })
}

/// Where the box's cells sit in the block that `plan` reads: a run of block rows, and the
/// block columns of the box's columns in order (a run, except on a periodic grid whose
/// block wraps the whole circle).
pub fn box_in_block(plan: &Plan) -> (Range<usize>, Vec<usize>) {
    let offset = plan.selection.rows.start - plan.block.rows.start;
    let rows = offset..offset + plan.selection.rows.len();
    let block_cols: Vec<usize> = plan.block.col_indices().collect();
    let cols = plan
        .selection
        .col_indices()
        .filter_map(|c| block_cols.iter().position(|&b| b == c))
        .collect();
    (rows, cols)
}

/// A box holding every cell of `grid`: the whole circle on a periodic grid, else from the
/// first to the last longitude (across the antimeridian where the grid crosses it).
pub fn whole_grid_bbox(grid: &Grid) -> BBox {
    let (lat, lon) = (grid.lat(), grid.lon());
    let (south, north) = (lat[0], lat[lat.len() - 1]);
    let (west, east) = if grid.is_periodic() {
        (-180.0, 180.0)
    } else {
        let west = (lon[0] + 180.0).rem_euclid(360.0) - 180.0;
        let span: f64 = lon.windows(2).map(|w| (w[1] - w[0]).rem_euclid(360.0)).sum();
        let east = west + span;
        (west, if east > 180.0 { east - 360.0 } else { east })
    };
    BBox::new(west, south, east, north).expect("a valid grid's extent is a valid box")
}
