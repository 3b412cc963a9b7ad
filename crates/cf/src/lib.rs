//! # shearbox-cf
//!
//! The CF-aware NetCDF reader of shearbox, and the only crate of the workspace that links the
//! netCDF-C library (through the `netcdf` crate). It turns a pressure-level file in any of
//! the common layouts into the kernel's normalised types ([`shearbox_core::Grid`],
//! [`shearbox_core::Levels`], [`shearbox_core::Fields`]).
//!
//! # Design
//!
//! - **Open reads metadata only.** [`Dataset::open`] scans the header into plain data,
//!   recognises which variable plays which [`Role`] (CF `standard_name` first, then units
//!   and `axis`, then common short names; `--var ROLE=NAME` overrides win, see
//!   [`VarOverrides`]), reads the four coordinates and normalises them. Data variables are
//!   read only by [`Dataset::read_fields`].
//! - **Normalised layout.** Latitudes south to north, levels bottom-up in Pa, longitudes in
//!   increasing-modulo-360° order with the file's own values (0..360, −180..180 and regional
//!   grids across the antimeridian alike; a duplicated cyclic column is dropped; a regional
//!   grid stored split at the antimeridian is rotated to start after its largest gap). Any
//!   dimension order is accepted: each variable's dimensions are matched to the coordinate
//!   dimensions, a variable may lack the time dimension and extra length-1 dimensions are
//!   read at index 0.
//! - **Hyperslab reads.** A block ([`shearbox_core::Selection`]) is read as one hyperslab
//!   per variable and time step, or two when it wraps around the file's column order, and
//!   reordered in memory. The values are bit-identical to reading the whole grid and taking
//!   [`shearbox_core::Fields::subset`]: each value depends only on its stored value and the
//!   variable's attributes.
//! - **CF packing and units, by hand.** The `netcdf` crate does not unpack: values are read
//!   as `f64` (exact for every stored type), `_FillValue`, `missing_value` and
//!   `valid_range`/`valid_min`/`valid_max` are tested in packed units, then
//!   `x * scale_factor + add_offset` and the unit conversion (geopotential / g0, degC + 273.15,
//!   hPa → Pa, ...) are applied in `f64` and the result rounded once to `f32`. Missing values
//!   are `NaN`.
//! - **Time** is decoded by the [`calendar`] module (day-number arithmetic for the six CF
//!   calendars) into ISO 8601 UTC strings.
//! - **Never panic.** A panic inside the `netcdf` crate (it unwraps some library errors) is
//!   caught and becomes [`CfError::Damaged`]; classic-format files are checked against the
//!   data size their header describes (the C library reads missing bytes as zeros); indices
//!   are checked before use.
//! - **Thread safety.** Every library call runs on one dedicated thread (netCDF-C is not
//!   thread-safe, and HDF5 prints its diagnostics on any other thread); see [`Dataset`].
//!   `Dataset` is `Send + Sync`.

pub mod calendar;
mod chunks;
mod dataset;
mod error;
mod format;
mod io;
mod meta;
pub mod output;
mod recognise;
mod role;
mod units;
pub mod write;

pub use calendar::Calendar;
pub use dataset::Dataset;
pub use error::CfError;
pub use io::{prepare_for_writing, set_chunk_cache};
pub use role::{Recognised, Role, VarOverrides};
pub use units::G0;

/// The `netcdf` crate, re-exported for the workspace's fixture generator, which writes files
/// byte for byte in layouts the reader must handle. Everything else reads through this crate's
/// typed API.
pub use netcdf;

/// Which time step to read.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum TimeSelector {
    /// The latest time in the file.
    Latest,
    /// An exact time, held as canonical ISO 8601 UTC (`YYYY-MM-DDTHH:MM:SSZ`).
    At(String),
}

impl TimeSelector {
    /// Parses `latest` (any case) or an ISO 8601 time: `2026-01-15T06:00:00Z`,
    /// `2026-01-15T06:00Z`, `2026-01-15T06:00:00`, `2026-01-15T06`, `2026-01-15` (a space may
    /// replace the `T`; a UTC offset such as `+02:00` is converted to UTC). `At` holds the
    /// canonical form, e.g. `2026-01-15T06:00:00Z`.
    pub fn parse(text: &str) -> Result<Self, CfError> {
        let t = text.trim();
        if t.eq_ignore_ascii_case("latest") {
            return Ok(TimeSelector::Latest);
        }
        calendar::parse_iso(t)
            .map(|d| TimeSelector::At(d.to_iso()))
            .map_err(|reason| CfError::BadTimeSelector { text: text.to_string(), reason })
    }
}

impl std::str::FromStr for TimeSelector {
    type Err = CfError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        TimeSelector::parse(s)
    }
}

/// Whether one diagnostic can be computed from a file, and why (or why not).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Capability {
    /// The diagnostic: `geostrophic_wind`, `thickness_geopotential`, `thickness_temperature`,
    /// `thermal_wind`, `layer_mean_temperature`, `temperature_gradient`, `baroclinic_torque`,
    /// `balance_ratio`, `thermal_advection`, `static_stability`, `eady`, `observed_shear`,
    /// `ageostrophic_shear`, `below_ground_mask`.
    pub name: &'static str,
    /// Whether the file's variables allow it.
    pub possible: bool,
    /// The variables used, or what is missing and how to name it (`--var ROLE=NAME`).
    pub reason: String,
}
