//! # shearbox-render
//!
//! The two pictures of shearbox, as SVG text: the **hodograph** of a box (the box-mean
//! geostrophic wind at each level, the thermal wind of each layer as the segment between two
//! levels, coloured by the sign of the layer's thermal advection) and the **layer map** of one
//! layer (thickness contours, thermal-wind arrows, baroclinic zones shaded by the magnitude of
//! the temperature gradient, a latitude–longitude graticule).
//!
//! Design choices:
//! - **Core types in, text out.** The hodograph takes a [`shearbox_core::BoxProfile`]; the map
//!   takes a [`LayerField`], views of one layer's gridded [`shearbox_core::LayerDiagnostics`]
//!   with its latitudes and longitudes. Nothing here reads a file, speaks HTTP or serialises
//!   a document: the service and the command line hand over the numbers and write the text.
//! - **General-purpose drawing.** Shapes, coordinate mapping and the SVG syntax come from
//!   `plotters` (its SVG backend); contour lines from the marching-squares of `contour`.
//!   Each part of a picture is drawn into its own fragment and wrapped in a group, so that the
//!   result carries a stable set of classes and `data-` attributes (the picture's DOM
//!   contract, listed in [`hodograph`] and [`map`]) that a browser page and the tests can rely
//!   on.
//! - **Undefined stays blank.** A masked (NaN) cell gets no shading, no arrow and no contour
//!   through it; a level without a box-mean geostrophic wind gets no point. A picture with
//!   nothing to draw still renders, with a note that says why, never invented values.
//! - **Every picture carries the caution** passed in [`Caption::caution`] (the project's one
//!   caution text, owned by the service crate), as `<text class="caution">`.

pub mod hodograph;
pub mod map;

mod contours;
mod labels;
mod palette;
mod svg;

pub use hodograph::{Advection, NEUTRAL_ADVECTION_K_PER_DAY, hodograph_svg};
pub use map::{
    DEFAULT_CONTOUR_INTERVAL_M, GRADIENT_BINS_K_PER_100KM, LayerField, MAX_ARROWS, MapOptions,
    TARGET_ARROWS_PER_SIDE, default_stride, map_svg,
};

use thiserror::Error;

/// What a picture is of: the names and the caution shown with it.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Caption<'a> {
    /// The dataset's name (or the input file's name).
    pub dataset: &'a str,
    /// The time of the step, ISO 8601 (empty for a file without a time coordinate).
    pub time: &'a str,
    /// The caution line every picture carries.
    pub caution: &'a str,
}

/// Why a picture could not be drawn.
#[derive(Debug, Error, Clone, PartialEq)]
pub enum RenderError {
    /// An array does not have the shape of the latitudes × longitudes given with it.
    #[error(
        "{what} has shape {got:?} but the grid has {expected:?} (latitudes × longitudes); pass \
         arrays of the same grid"
    )]
    ShapeMismatch {
        /// Which array.
        what: &'static str,
        /// Rows and columns expected.
        expected: (usize, usize),
        /// Rows and columns given.
        got: (usize, usize),
    },
    /// Coordinates that cannot be mapped.
    #[error("{axis}: {reason}")]
    BadCoordinates {
        /// Which axis.
        axis: &'static str,
        /// What is wrong.
        reason: String,
    },
    /// An option out of its range.
    #[error("{option} = {value}: {expected}")]
    BadOption {
        /// The option.
        option: &'static str,
        /// The value given.
        value: String,
        /// What it must be.
        expected: &'static str,
    },
    /// More arrows than a picture holds.
    #[error(
        "a stride of {stride} leaves {arrows} arrow cells, over the limit of {max}; use a stride \
         of at least {fits} or a smaller box"
    )]
    TooManyArrows {
        /// The stride asked for.
        stride: usize,
        /// Decimated cells at that stride.
        arrows: usize,
        /// The limit ([`MAX_ARROWS`]).
        max: usize,
        /// The smallest stride that fits.
        fits: usize,
    },
    /// The drawing library failed (a fault of this crate, not of the input).
    #[error("drawing failed: {0}")]
    Drawing(String),
}
