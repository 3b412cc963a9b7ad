//! The box query: a dataset, a box, a time and optionally one layer in, a profile out.
//!
//! Only the box and its one-cell halo are read, at one time step; the halo makes every
//! value in the box equal to what the whole grid would give (the kernel's invariant).

use shearbox_cf::{CfError, Dataset, TimeSelector};
use shearbox_core::{BBox, Config, CoreError, box_profile, compute};
use thiserror::Error;

use crate::wire::ProfileDoc;

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

/// Computes the profile document of `request` on `ds`, named `name` in the document.
pub fn profile(
    name: &str,
    ds: &Dataset,
    request: &ProfileRequest,
    cfg: &Config,
) -> Result<ProfileDoc, QueryError> {
    let levels = ds.levels();
    let layers = match request.layer {
        Some((bottom, top)) => vec![levels.layer(bottom, top)?],
        None => levels.adjacent_layers(),
    };
    let grid = ds.grid();
    let sel = grid.select_box(&request.bbox)?;
    let time_idx = ds.time_index(&request.time)?;
    let fields = ds.read_fields(time_idx, Some(&sel.with_halo(grid.n_lat())))?;
    let diag = compute(&fields, &layers, cfg);
    let profile = box_profile(&fields, &diag, &request.bbox)?;
    Ok(ProfileDoc::new(name, &ds.times()[time_idx], &request.bbox, &profile))
}
