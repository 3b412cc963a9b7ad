//! Recognition: which variable plays which [`Role`].
//!
//! Precedence, for every role: a `--var` override; then the CF `standard_name`; then (for
//! coordinates) units and `axis`/`positive`; then common short names, compared
//! case-insensitively in the order of [`Role::short_names`]. Coordinates must be
//! one-dimensional (time may be a scalar). Fields must span the latitude and longitude
//! dimensions, and the level dimension for fields on pressure levels (surface fields must
//! not); a variable is used for one role only.

use std::path::Path;

use crate::meta::VarMeta;
use crate::units;
use crate::{CfError, Role, VarOverrides};

/// A recognised variable: its index in the metadata and what matched.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct Match {
    pub index: usize,
    pub matched_by: &'static str,
}

pub(crate) const BY_OVERRIDE: &str = "--var override";
pub(crate) const BY_STANDARD_NAME: &str = "standard_name";
pub(crate) const BY_UNITS_AXIS: &str = "units/axis";
pub(crate) const BY_SHORT_NAME: &str = "short name";

fn override_index(
    path: &Path,
    vars: &[VarMeta],
    overrides: &VarOverrides,
    role: Role,
) -> Result<Option<usize>, CfError> {
    let Some(name) = overrides.get(role) else { return Ok(None) };
    match vars.iter().position(|v| v.name == name) {
        Some(i) => Ok(Some(i)),
        None => Err(CfError::OverrideNotFound {
            file: path.to_path_buf(),
            role,
            name: name.to_string(),
            available: vars.iter().map(|v| v.name.clone()).collect(),
        }),
    }
}

/// First index satisfying `pred`, preferring coordinate variables (dimension named as the
/// variable).
fn first_pref(vars: &[VarMeta], pred: impl Fn(&VarMeta) -> bool) -> Option<usize> {
    vars.iter()
        .position(|v| v.is_coordinate_variable() && pred(v))
        .or_else(|| vars.iter().position(&pred))
}

fn by_short_name(vars: &[VarMeta], role: Role, ok: impl Fn(&VarMeta) -> bool) -> Option<usize> {
    role.short_names().iter().find_map(|short| {
        vars.iter()
            .position(|v| v.name == *short && ok(v))
            .or_else(|| vars.iter().position(|v| v.name.eq_ignore_ascii_case(short) && ok(v)))
    })
}

fn has_standard_name(v: &VarMeta, role: Role) -> bool {
    v.text("standard_name").is_some_and(|s| role.standard_names().contains(&s))
}

fn axis_is(v: &VarMeta, axis: &str) -> bool {
    v.text("axis").is_some_and(|a| a.eq_ignore_ascii_case(axis))
}

/// Finds a coordinate variable. `Ok(None)` when nothing matches (the caller decides whether
/// that is an error).
pub(crate) fn coordinate(
    path: &Path,
    vars: &[VarMeta],
    overrides: &VarOverrides,
    role: Role,
) -> Result<Option<Match>, CfError> {
    if let Some(index) = override_index(path, vars, overrides, role)? {
        return Ok(Some(Match { index, matched_by: BY_OVERRIDE }));
    }
    let shape_ok = |v: &VarMeta| match role {
        Role::Time => v.dims.len() <= 1,
        _ => v.dims.len() == 1,
    };
    let found = |index: Option<usize>, matched_by| index.map(|index| Match { index, matched_by });
    if let Some(m) =
        found(first_pref(vars, |v| shape_ok(v) && has_standard_name(v, role)), BY_STANDARD_NAME)
    {
        return Ok(Some(m));
    }
    let by_units = match role {
        Role::Latitude => {
            first_pref(vars, |v| shape_ok(v) && (units::is_lat_units(v.units()) || axis_is(v, "Y")))
        }
        Role::Longitude => {
            first_pref(vars, |v| shape_ok(v) && (units::is_lon_units(v.units()) || axis_is(v, "X")))
        }
        Role::Level => first_pref(vars, |v| {
            shape_ok(v)
                && units::pressure(v.units()).is_some()
                && (axis_is(v, "Z") || v.attr("positive").is_some() || v.is_coordinate_variable())
        }),
        Role::Time => first_pref(vars, |v| {
            let not_reference = !matches!(
                v.text("standard_name"),
                Some("forecast_reference_time" | "forecast_period")
            );
            shape_ok(v)
                && not_reference
                && (axis_is(v, "T") || v.units().to_ascii_lowercase().contains(" since "))
                && (v.dims.len() == 1 || v.name.eq_ignore_ascii_case("time"))
        }),
        _ => None,
    };
    if let Some(m) = found(by_units, BY_UNITS_AXIS) {
        return Ok(Some(m));
    }
    Ok(found(by_short_name(vars, role, shape_ok), BY_SHORT_NAME))
}

/// The dimensions that fields are recognised against.
pub(crate) struct CoordDims<'a> {
    pub lat: &'a str,
    pub lon: &'a str,
    pub level: &'a str,
}

/// Whether a variable spans the dimensions a field of `role` needs.
pub(crate) fn spans(v: &VarMeta, role: Role, dims: &CoordDims<'_>) -> bool {
    let has = |d: &str| v.dims.iter().any(|(n, _)| n == d);
    has(dims.lat) && has(dims.lon) && (has(dims.level) == role.is_3d())
}

/// Finds the variable of a field role among those not yet `used`.
pub(crate) fn field(
    path: &Path,
    vars: &[VarMeta],
    overrides: &VarOverrides,
    role: Role,
    dims: &CoordDims<'_>,
    used: &[usize],
) -> Result<Option<Match>, CfError> {
    if let Some(index) = override_index(path, vars, overrides, role)? {
        return Ok(Some(Match { index, matched_by: BY_OVERRIDE }));
    }
    let ok =
        |i: usize, v: &VarMeta| !used.contains(&i) && v.dtype.is_some() && spans(v, role, dims);
    let by_std = vars.iter().enumerate().position(|(i, v)| ok(i, v) && has_standard_name(v, role));
    if let Some(index) = by_std {
        return Ok(Some(Match { index, matched_by: BY_STANDARD_NAME }));
    }
    let by_short = role.short_names().iter().find_map(|short| {
        let exact = vars.iter().enumerate().position(|(i, v)| ok(i, v) && v.name == *short);
        exact.or_else(|| {
            vars.iter()
                .enumerate()
                .position(|(i, v)| ok(i, v) && v.name.eq_ignore_ascii_case(short))
        })
    });
    Ok(by_short.map(|index| Match { index, matched_by: BY_SHORT_NAME }))
}
