//! The one error type of the reader.
//!
//! Every variant carries structured fields: the file, the variable, what was found, what was
//! expected, and the message says what to do about it (which names were tried and which
//! `--var ROLE=NAME` override would fix a recognition failure).

use std::path::{Path, PathBuf};

use thiserror::Error;

use crate::Role;

/// `"FILE: "` or `""` for errors raised outside a file (calendar arithmetic on its own).
fn at(file: &Option<PathBuf>, variable: &Option<String>) -> String {
    match (file, variable) {
        (Some(f), Some(v)) => format!("{}: variable {v:?}: ", f.display()),
        (Some(f), None) => format!("{}: ", f.display()),
        (None, Some(v)) => format!("variable {v:?}: "),
        (None, None) => String::new(),
    }
}

/// What went wrong while opening, recognising or reading a file.
#[derive(Debug, Error)]
pub enum CfError {
    /// The file could not be read from disk.
    #[error("{}: cannot read the file: {source}; check the path and permissions", file.display())]
    Io {
        /// The file.
        file: PathBuf,
        /// The operating-system error.
        #[source]
        source: std::io::Error,
    },
    /// The netCDF library refused to open the file (not netCDF, or a damaged header).
    #[error(
        "{}: not a readable netCDF file ({source}); expected a netCDF classic, 64-bit offset \
         or netCDF-4 file — check that the download is complete",
        file.display()
    )]
    Open {
        /// The file.
        file: PathBuf,
        /// The library's error.
        #[source]
        source: netcdf::Error,
    },
    /// The file is damaged: truncated, or the library failed (or misbehaved) on it.
    #[error("{}: the file is damaged: {reason}; re-create or re-download it", file.display())]
    Damaged {
        /// The file.
        file: PathBuf,
        /// What was found.
        reason: String,
    },
    /// Reading a variable's data failed inside the netCDF library.
    #[error(
        "{}: reading variable {variable:?} failed: {source}; the file may be truncated or \
         damaged — re-create or re-download it",
        file.display()
    )]
    Read {
        /// The file.
        file: PathBuf,
        /// The variable.
        variable: String,
        /// The library's error.
        #[source]
        source: netcdf::Error,
    },
    /// No variable could be recognised for a role.
    #[error(
        "{}: no {} variable found (tried: {tried}); set --var {}=NAME to name it",
        file.display(), role.description(), role.key()
    )]
    MissingVariable {
        /// The file.
        file: PathBuf,
        /// The role that has no variable.
        role: Role,
        /// What was tried, in words (standard names, units/axis, short names).
        tried: String,
    },
    /// A `--var` override names a variable that is not in the file.
    #[error(
        "{}: --var {}={name} names no variable in the file; variables present: {}",
        file.display(), role.key(), available.join(", ")
    )]
    OverrideNotFound {
        /// The file.
        file: PathBuf,
        /// The role overridden.
        role: Role,
        /// The name given.
        name: String,
        /// The variables of the file.
        available: Vec<String>,
    },
    /// Neither geopotential nor temperature is present.
    #[error(
        "{}: neither geopotential nor temperature was found (geopotential tried: {tried_geopotential}; \
         temperature tried: {tried_temperature}); at least one is needed — set \
         --var geopotential=NAME or --var temperature=NAME",
        file.display()
    )]
    NoThicknessInput {
        /// The file.
        file: PathBuf,
        /// What was tried for geopotential.
        tried_geopotential: String,
        /// What was tried for temperature.
        tried_temperature: String,
    },
    /// A variable's units are missing, unknown or wrong for its role.
    #[error(
        "{}: variable {variable:?} ({}) has units {found:?}; expected one of: {accepted}; \
         fix the units attribute or choose another variable with --var {}=NAME",
        file.display(), role.description(), role.key()
    )]
    WrongUnits {
        /// The file.
        file: PathBuf,
        /// The variable.
        variable: String,
        /// Its role.
        role: Role,
        /// The units found (`""` when the attribute is missing).
        found: String,
        /// The units accepted, in words.
        accepted: String,
    },
    /// A coordinate is not strictly monotonic (or, for longitude, not monotonic modulo 360°).
    #[error(
        "{}: coordinate {variable:?} is not strictly monotonic at index {index} ({prev} then \
         {next}); expected strictly increasing or decreasing values{}",
        file.display(), if *role == Role::Longitude { " (modulo 360°)" } else { "" }
    )]
    NotMonotonic {
        /// The file.
        file: PathBuf,
        /// The coordinate variable.
        variable: String,
        /// Its role.
        role: Role,
        /// Index (in the file) of the offending value.
        index: usize,
        /// The value before it.
        prev: f64,
        /// The offending value.
        next: f64,
    },
    /// A variable's dimensions or shape do not fit the recognised coordinates.
    #[error(
        "{}: variable {variable:?} has dimensions {dims}: {reason}",
        file.display()
    )]
    Dimensions {
        /// The file.
        file: PathBuf,
        /// The variable.
        variable: String,
        /// Its dimensions, `name=len` in file order.
        dims: String,
        /// What does not fit and what was expected.
        reason: String,
    },
    /// An attribute could not be understood.
    #[error(
        "{}: attribute {attribute:?} of variable {variable:?}: {reason}",
        file.display()
    )]
    BadAttribute {
        /// The file.
        file: PathBuf,
        /// The variable.
        variable: String,
        /// The attribute.
        attribute: String,
        /// What is wrong.
        reason: String,
    },
    /// The time coordinate's calendar is not one of CF's.
    #[error(
        "{}unknown calendar {calendar:?}; expected one of: {}",
        at(file, variable),
        crate::Calendar::ACCEPTED
    )]
    UnknownCalendar {
        /// The file, when known.
        file: Option<PathBuf>,
        /// The time variable, when known.
        variable: Option<String>,
        /// The calendar attribute found.
        calendar: String,
    },
    /// Time units that are not `"<unit> since <date>"`.
    #[error(
        "{}time units {units:?} not understood: {reason}; expected e.g. \"hours since \
         1900-01-01 00:00:00\"",
        at(file, variable)
    )]
    TimeUnits {
        /// The file, when known.
        file: Option<PathBuf>,
        /// The time variable, when known.
        variable: Option<String>,
        /// The units found.
        units: String,
        /// What is wrong.
        reason: String,
    },
    /// A time value that cannot be decoded.
    #[error("{}time value {value} cannot be decoded: {reason}", at(file, variable))]
    TimeValue {
        /// The file, when known.
        file: Option<PathBuf>,
        /// The time variable, when known.
        variable: Option<String>,
        /// The value.
        value: f64,
        /// Why.
        reason: String,
    },
    /// The file has a time dimension with no steps.
    #[error(
        "{}: time dimension of {variable:?} has no steps; the file holds no data to read",
        file.display()
    )]
    NoTimeSteps {
        /// The file.
        file: PathBuf,
        /// The time variable.
        variable: String,
    },
    /// The requested time is not in the file.
    #[error(
        "{}: time {wanted} is not in the file; it has {count} step(s) from {first} to {last} \
         ({calendar} calendar); pick one of those or use \"latest\"",
        file.display()
    )]
    TimeNotFound {
        /// The file.
        file: PathBuf,
        /// The time asked for (ISO 8601).
        wanted: String,
        /// First time in the file (file order), or "(none)".
        first: String,
        /// Last time in the file (file order), or "(none)".
        last: String,
        /// Number of time steps.
        count: usize,
        /// The file's calendar.
        calendar: crate::Calendar,
    },
    /// A time index past the end.
    #[error(
        "{}: time index {index} is out of range; the file has {count} step(s)",
        file.display()
    )]
    TimeIndexOutOfRange {
        /// The file.
        file: PathBuf,
        /// The index asked for.
        index: usize,
        /// The number of steps.
        count: usize,
    },
    /// A time selector that is neither `latest` nor ISO 8601.
    #[error(
        "time {text:?} not understood: {reason}; use \"latest\" or ISO 8601 such as \
         2026-01-15T06:00:00Z"
    )]
    BadTimeSelector {
        /// The text given.
        text: String,
        /// Why it was refused.
        reason: String,
    },
    /// A `--var` argument that is not `ROLE=NAME`.
    #[error(
        "--var {arg:?}: {reason}; expected ROLE=NAME with ROLE one of: {}",
        crate::Role::keys_list()
    )]
    BadOverride {
        /// The argument given.
        arg: String,
        /// Why it was refused.
        reason: String,
    },
    /// A selection that does not belong to this file's grid.
    #[error("{}: selection does not fit the grid: {reason}", file.display())]
    Selection {
        /// The file.
        file: PathBuf,
        /// What does not fit.
        reason: String,
    },
    /// Writing (or reading back) an output file failed.
    #[error("{}: {what}{}", file.display(), source.as_ref().map(|e| format!(": {e}")).unwrap_or_default())]
    Write {
        /// The output file.
        file: PathBuf,
        /// What was being done, or what is wrong.
        what: String,
        /// The library's error, when it raised one.
        #[source]
        source: Option<Box<netcdf::Error>>,
    },
    /// The coordinates or fields were refused by the kernel's validation.
    #[error("{}: {what}: {source}", file.display())]
    Core {
        /// The file.
        file: PathBuf,
        /// What was being built.
        what: &'static str,
        /// The kernel's error.
        #[source]
        source: shearbox_core::CoreError,
    },
}

impl CfError {
    /// Fills in the file and variable of the calendar errors, which are raised without them.
    pub(crate) fn in_file(self, path: &Path, var: &str) -> CfError {
        match self {
            CfError::UnknownCalendar { calendar, .. } => CfError::UnknownCalendar {
                file: Some(path.to_path_buf()),
                variable: Some(var.to_string()),
                calendar,
            },
            CfError::TimeUnits { units, reason, .. } => CfError::TimeUnits {
                file: Some(path.to_path_buf()),
                variable: Some(var.to_string()),
                units,
                reason,
            },
            CfError::TimeValue { value, reason, .. } => CfError::TimeValue {
                file: Some(path.to_path_buf()),
                variable: Some(var.to_string()),
                value,
                reason,
            },
            other => other,
        }
    }
}
