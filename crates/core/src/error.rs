//! The one error type of the kernel crate.
//!
//! The kernel only fails while its inputs are being validated ([`crate::Grid::new`],
//! [`crate::Levels::from_pa`], [`crate::FieldsBuilder::build`], [`crate::BBox::new`], layer
//! look-ups); each variant carries the values that were wrong so that the edges can tell the
//! user what to change.

use thiserror::Error;

/// What was wrong with the inputs handed to the kernel.
#[derive(Debug, Clone, PartialEq, Error)]
pub enum CoreError {
    /// A coordinate is not strictly increasing after normalisation, or holds a non-finite value.
    #[error(
        "{axis} coordinate is not strictly monotonic at index {index} ({prev} then {next}); \
         each {axis} value must differ from the last in the same direction"
    )]
    NotMonotonic {
        /// Which coordinate: "latitude", "longitude" or "pressure".
        axis: &'static str,
        /// Index of the first offending value.
        index: usize,
        /// The value before it.
        prev: f64,
        /// The offending value.
        next: f64,
    },
    /// A coordinate value lies outside its physical range.
    #[error("{axis} value {value} is out of range ({expected})")]
    OutOfRange {
        /// Which coordinate.
        axis: &'static str,
        /// The offending value.
        value: f64,
        /// The accepted range, in words.
        expected: &'static str,
    },
    /// A coordinate has too few points for a horizontal derivative.
    #[error("{axis} has {len} point(s); at least {min} are needed")]
    TooShort {
        /// Which coordinate.
        axis: &'static str,
        /// How many points it has.
        len: usize,
        /// How many are needed.
        min: usize,
    },
    /// An array's shape does not match the grid and levels.
    #[error("{what} has shape {found:?}, expected {expected:?} ([level,] lat, lon)")]
    ShapeMismatch {
        /// Which field.
        what: &'static str,
        /// Its shape.
        found: Vec<usize>,
        /// The shape the grid and levels call for.
        expected: Vec<usize>,
    },
    /// Neither geopotential nor temperature was given, so no thickness can be formed.
    #[error(
        "neither geopotential height nor temperature is present: no thickness or thermal wind \
         can be computed"
    )]
    NoThicknessInput,
    /// A bounding box is malformed.
    #[error(
        "invalid bbox: {reason}; give W,S,E,N in degrees (GeoJSON order), W > E to cross the antimeridian"
    )]
    InvalidBBox {
        /// What is wrong with it.
        reason: String,
    },
    /// A requested pressure level is not one of the levels present.
    #[error("level {wanted_hpa} hPa is not in the data; levels present (hPa): {available_hpa:?}")]
    LevelNotFound {
        /// The level asked for, in hPa.
        wanted_hpa: f64,
        /// The levels present, in hPa, bottom-up.
        available_hpa: Vec<f64>,
    },
    /// No grid cell centre lies inside the box.
    #[error(
        "no grid cell centre lies inside the box {west},{south},{east},{north}; the grid spans \
         latitudes {lat_min}..{lat_max} and longitudes {lon_min}..{lon_max}"
    )]
    EmptyBox {
        /// Western edge asked for.
        west: f64,
        /// Southern edge asked for.
        south: f64,
        /// Eastern edge asked for.
        east: f64,
        /// Northern edge asked for.
        north: f64,
        /// Southernmost grid latitude.
        lat_min: f64,
        /// Northernmost grid latitude.
        lat_max: f64,
        /// First grid longitude.
        lon_min: f64,
        /// Last grid longitude.
        lon_max: f64,
    },
    /// A layer's bottom is not below its top.
    #[error("layer {bottom_hpa}-{top_hpa} hPa: the bottom pressure must be greater than the top")]
    InvertedLayer {
        /// Bottom pressure asked for, hPa.
        bottom_hpa: f64,
        /// Top pressure asked for, hPa.
        top_hpa: f64,
    },
}
