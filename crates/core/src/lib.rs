//! # shearbox-core
//!
//! The numerical kernel of shearbox: geostrophic and thermal wind, thickness, baroclinicity,
//! thermal advection and static stability on a latitude–longitude grid in pressure
//! coordinates, with the latitude-varying Coriolis parameter `f = 2Ω sin φ`.
//!
//! Every formula, stencil, mask and box-mean rule follows the project's numerical contract
//! (`physics.md`). The crate knows nothing about files, sockets or serialisation: the reader
//! (`shearbox-cf`) hands it validated, normalised arrays ([`Fields`]) and the edges (CLI,
//! service) turn its results ([`Diagnostics`], [`BoxProfile`]) into their own wire types.
//!
//! Design choices:
//! - **Validated once.** [`Grid`], [`Levels`] and [`Fields`] check monotonic coordinates,
//!   shapes and units when built; past that, the kernel cannot fail on good input and
//!   [`compute`] returns plain values, with undefined cells as `NaN` and a counted
//!   [`MaskReason`] for each.
//! - **Normalised layout.** Arrays are `[level, lat, lon]` with levels bottom-up (pressure
//!   decreasing), latitudes south to north and longitudes increasing. A sub-box read with a
//!   one-cell halo ([`Selection::with_halo`]) gives the same numbers as the whole grid.
//! - **f32 storage, f64 arithmetic.** Inputs and outputs are `f32` (half the memory traffic
//!   of a memory-bound kernel); each cell's arithmetic runs in `f64` registers because
//!   thickness is a difference of two large heights and derivatives are differences of
//!   neighbouring values, both of which lose digits in `f32`.
//! - **Parallel over (layer, row)** with rayon; [`Parallelism::Serial`] runs the same code on
//!   one thread, and both give bit-identical results.
//!
//! ```
//! use ndarray::Array3;
//! use shearbox_core::{compute, BBox, Config, FieldsBuilder, Grid, Levels, box_profile};
//!
//! let lat: Vec<f64> = (0..11).map(|j| 40.0 + j as f64).collect();
//! let lon: Vec<f64> = (0..11).map(|i| -5.0 + i as f64).collect();
//! let grid = Grid::new(lat, lon).unwrap();
//! let levels = Levels::from_pa(vec![100_000.0, 50_000.0]).unwrap();
//! // A thickness that grows northward by 1 m per degree: thermal wind from the east.
//! let z = Array3::from_shape_fn((2, 11, 11), |(k, j, _)| {
//!     if k == 0 { 100.0 } else { 5500.0 + j as f32 }
//! });
//! let fields = FieldsBuilder::new(grid, levels).geopotential_height(z).build().unwrap();
//! let layers = fields.levels().adjacent_layers();
//! let diag = compute(&fields, &layers, &Config::default());
//! let bbox = BBox::new(-2.0, 42.0, 2.0, 48.0).unwrap();
//! let profile = box_profile(&fields, &diag, &bbox).unwrap();
//! assert!(profile.layers[0].thermal_wind.unwrap().u < 0.0);
//! ```

mod boxmean;
mod constants;
mod error;
mod fields;
mod grid;
mod kernel;
mod levels;
mod mask;

pub use boxmean::{BoxProfile, LayerMeans, LevelMeans, Turning, Vector, box_profile};
pub use constants::{Config, Constants};
pub use error::CoreError;
pub use fields::{Fields, FieldsBuilder};
pub use grid::{BBox, Grid, Selection};
pub use kernel::{
    Diagnostics, LayerDiagnostics, LevelDiagnostics, MIN_GRADIENT_FOR_RATIO, MeanTemperatureKind,
    Parallelism, ThicknessMethod, compute, compute_baseline, compute_into, compute_with,
};
pub use levels::{Layer, Levels};
pub use mask::{MaskCounts, MaskReason};
