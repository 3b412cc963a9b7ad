//! [`Dataset`]: open, recognise, normalise and read hyperslabs.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use ndarray::{Array2, Array3, ArrayD, Axis, IxDyn};
use netcdf::Extent;
use shearbox_core::{Fields, FieldsBuilder, Grid, Levels, Selection};

use crate::calendar::{self, Calendar};
use crate::format::{self, Magic};
use crate::io;
use crate::meta::{self, Attr, DType, VarMeta};
use crate::recognise::{self, CoordDims, Match};
use crate::units::{self, Conv};
use crate::{Capability, CfError, Recognised, Role, TimeSelector, VarOverrides};

/// How a variable's stored values become physical values: CF packing and missing values.
///
/// Missing-value tests (`_FillValue`, `missing_value`, `valid_range` / `valid_min` /
/// `valid_max`, and the type's default fill when there is no `_FillValue`) are made on the
/// packed value, before `x * scale_factor + add_offset`.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct Packing {
    dtype: DType,
    scale: f64,
    offset: f64,
    packed: bool,
    fill: Option<f64>,
    missing: Vec<f64>,
    valid_min: Option<f64>,
    valid_max: Option<f64>,
}

impl Packing {
    fn from_meta(path: &Path, v: &VarMeta) -> Result<Packing, CfError> {
        let dtype = v.dtype.ok_or_else(|| CfError::Dimensions {
            file: path.to_path_buf(),
            variable: v.name.clone(),
            dims: v.dims_text(),
            reason: "the variable is not numeric; expected an integer or floating-point type"
                .to_string(),
        })?;
        let bad = |attribute: &str, reason: &str| CfError::BadAttribute {
            file: path.to_path_buf(),
            variable: v.name.clone(),
            attribute: attribute.to_string(),
            reason: reason.to_string(),
        };
        let number = |name: &str| -> Result<Option<f64>, CfError> {
            match v.attr(name) {
                None => Ok(None),
                Some(Attr::Num(x)) if x.len() == 1 => Ok(Some(x[0])),
                Some(Attr::Num(_)) => Err(bad(name, "expected a single number")),
                Some(Attr::Text(_)) => Err(bad(name, "expected a number, found text")),
            }
        };
        let numbers = |name: &str| -> Result<Vec<f64>, CfError> {
            match v.attr(name) {
                None => Ok(Vec::new()),
                Some(Attr::Num(x)) => Ok(x.clone()),
                Some(Attr::Text(_)) => Err(bad(name, "expected numbers, found text")),
            }
        };
        let scale = number("scale_factor")?;
        let offset = number("add_offset")?;
        let fill = number("_FillValue")?.or_else(|| dtype.default_fill());
        let missing = numbers("missing_value")?;
        let (mut valid_min, mut valid_max) = (number("valid_min")?, number("valid_max")?);
        let range = numbers("valid_range")?;
        if !range.is_empty() {
            if range.len() != 2 || range[0] > range[1] {
                return Err(bad("valid_range", "expected two numbers, minimum then maximum"));
            }
            valid_min = Some(range[0]);
            valid_max = Some(range[1]);
        }
        // Compare in the variable's own type: a float32 variable's attributes are rounded to
        // float32 as its values were.
        let round = |x: f64| if dtype == DType::F32 { f64::from(x as f32) } else { x };
        Ok(Packing {
            dtype,
            scale: scale.unwrap_or(1.0),
            offset: offset.unwrap_or(0.0),
            packed: scale.is_some() || offset.is_some(),
            fill: fill.map(round),
            missing: missing.into_iter().map(round).collect(),
            valid_min: valid_min.map(round),
            valid_max: valid_max.map(round),
        })
    }

    /// The physical value of one stored value (`NaN` when missing).
    #[inline]
    fn value(&self, raw: f64) -> f64 {
        if raw.is_nan()
            || self.fill == Some(raw)
            || self.missing.contains(&raw)
            || self.valid_min.is_some_and(|m| raw < m)
            || self.valid_max.is_some_and(|m| raw > m)
        {
            return f64::NAN;
        }
        if self.packed { raw * self.scale + self.offset } else { raw }
    }

    /// The physical values of `raw` after `conv`, as f32: the same numbers as
    /// `conv.apply(self.value(x)) as f32` for each `x`, with the tests and the conversion
    /// chosen once per slice rather than once per value.
    fn convert_slice(&self, conv: Conv, raw: &[f64]) -> Vec<f32> {
        if !self.missing.is_empty() || self.valid_min.is_some() || self.valid_max.is_some() {
            return raw.iter().map(|&x| conv.apply(self.value(x)) as f32).collect();
        }
        // Only the fill value and NaN mark missing values; NaN never equals the fill.
        let fill = self.fill.unwrap_or(f64::NAN);
        let (scale, offset) = (self.scale, self.offset);
        fn run(raw: &[f64], fill: f64, f: impl Fn(f64) -> f64) -> Vec<f32> {
            raw.iter()
                .map(|&x| if x == fill || x.is_nan() { f32::NAN } else { f(x) as f32 })
                .collect()
        }
        match (self.packed, conv) {
            (false, Conv::None) => run(raw, fill, |x| x),
            (false, Conv::Div(d)) => run(raw, fill, |x| x / d),
            (false, Conv::Mul(m)) => run(raw, fill, |x| x * m),
            (false, Conv::Add(a)) => run(raw, fill, |x| x + a),
            (true, Conv::None) => run(raw, fill, |x| x * scale + offset),
            (true, Conv::Div(d)) => run(raw, fill, |x| (x * scale + offset) / d),
            (true, Conv::Mul(m)) => run(raw, fill, |x| (x * scale + offset) * m),
            (true, Conv::Add(a)) => run(raw, fill, |x| (x * scale + offset) + a),
        }
    }

    fn describe(&self) -> Option<String> {
        self.packed.then(|| format!("unpacked {}: x*scale_factor+add_offset", self.dtype.name()))
    }
}

/// What one dimension of a field variable is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum DimKind {
    Time,
    Level,
    Lat,
    Lon,
    /// An extra dimension of length 1, read at index 0.
    Single,
}

/// A recognised field and how to read it.
#[derive(Debug, Clone)]
struct FieldVar {
    role: Role,
    name: String,
    kinds: Vec<DimKind>,
    lens: Vec<usize>,
    packing: Packing,
    conv: Conv,
}

/// The longitude order: normalised column `j` is the file column
/// `seq((rot + j) % n)`, where `seq(a) = a` for a file stored in increasing order and
/// `n − 1 − a` for one stored in decreasing order.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) struct LonMap {
    /// Number of columns kept (a duplicated cyclic last column is dropped).
    pub n: usize,
    /// Rotation, in the increasing sequence.
    pub rot: usize,
    /// Whether the file stores longitudes in decreasing order.
    pub descending: bool,
}

/// A contiguous run of file indices, reversed after reading when `reverse`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
struct Run {
    start: usize,
    len: usize,
    reverse: bool,
}

impl LonMap {
    /// The file runs that hold normalised columns `start .. start + len` (cyclic), in order.
    fn runs(&self, start: usize, len: usize) -> Vec<Run> {
        let n = self.n;
        let a0 = (self.rot + start) % n;
        let mut pieces = vec![(a0, len.min(n - a0))];
        if a0 + len > n {
            pieces.push((0, a0 + len - n));
        }
        pieces
            .into_iter()
            .map(|(a, l)| {
                if self.descending {
                    Run { start: n - a - l, len: l, reverse: true }
                } else {
                    Run { start: a, len: l, reverse: false }
                }
            })
            .collect()
    }
}

/// A step around the circle from `a` to `b`, degrees in [0, 360).
fn circ(a: f64, b: f64) -> f64 {
    (b - a).rem_euclid(360.0)
}

/// Puts file longitudes into increasing-modulo-360 order. `Err((index, prev, next))` when
/// they are not a rotation of a monotonic sequence around the circle.
pub(crate) fn normalise_lon(lon: &[f64]) -> Result<(LonMap, Vec<f64>), (usize, f64, f64)> {
    let mut n = lon.len();
    if n >= 3 {
        let d = circ(lon[0], lon[n - 1]);
        if !(1e-6..=360.0 - 1e-6).contains(&d) {
            n -= 1;
        }
    }
    let lon = &lon[..n];
    if let Some(i) = lon.iter().position(|x| !x.is_finite()) {
        return Err((i, if i > 0 { lon[i - 1] } else { f64::NAN }, lon[i]));
    }
    if n < 2 {
        return Ok((LonMap { n, rot: 0, descending: false }, lon.to_vec()));
    }
    let steps = |seq: &[f64]| -> Result<Vec<f64>, usize> {
        let mut total = 0.0;
        let mut out = Vec::with_capacity(seq.len());
        for (i, w) in seq.windows(2).enumerate() {
            let s = circ(w[0], w[1]);
            total += s;
            if s <= 0.0 || total >= 360.0 - 1e-9 {
                return Err(i + 1);
            }
            out.push(s);
        }
        Ok(out)
    };
    let forward = steps(lon);
    let reversed: Vec<f64> = lon.iter().rev().copied().collect();
    let (descending, seq, gaps) = match forward {
        Ok(g) => (false, lon.to_vec(), g),
        Err(fi) => match steps(&reversed) {
            Ok(g) => (true, reversed, g),
            Err(_) => return Err((fi, lon[fi - 1], lon[fi])),
        },
    };
    let wrap = 360.0 - gaps.iter().sum::<f64>();
    // Start after the largest gap when an interior gap is clearly larger than the wrap gap
    // (a regional grid stored split at some longitude); otherwise keep the file's start.
    let (k, &largest) = gaps
        .iter()
        .enumerate()
        .max_by(|a, b| a.1.total_cmp(b.1).then(b.0.cmp(&a.0)))
        .unwrap_or((0, &0.0));
    let rot = if largest > wrap * (1.0 + 1e-3) + 1e-6 { k + 1 } else { 0 };
    let values = (0..n).map(|j| seq[(rot + j) % n]).collect();
    Ok((LonMap { n, rot, descending }, values))
}

/// Direction of a strictly monotonic sequence: `Ok(true)` when decreasing.
fn direction(values: &[f64]) -> Result<bool, (usize, f64, f64)> {
    if let Some(i) = values.iter().position(|x| !x.is_finite()) {
        return Err((i, if i > 0 { values[i - 1] } else { f64::NAN }, values[i]));
    }
    if values.len() < 2 {
        return Ok(false);
    }
    let desc = values[1] < values[0];
    for (i, w) in values.windows(2).enumerate() {
        let ok = if desc { w[1] < w[0] } else { w[1] > w[0] };
        if !ok {
            return Err((i + 1, w[0], w[1]));
        }
    }
    Ok(desc)
}

/// A recognised coordinate.
struct Coord {
    index: usize,
    matched_by: &'static str,
}

/// A CF pressure-level dataset: metadata and coordinates read at open, fields read on
/// demand one time step and one block at a time.
///
/// # Thread safety
///
/// Invariant: every call into the netCDF-C library made by this crate runs on the crate's
/// single netCDF thread (module `io`), and no library object (variable, attribute, handle
/// borrow) outlives the job that uses it. The dataset keeps the file handle in an `Arc` that
/// only jobs touch; `Drop` sends it to that thread to be closed. One block read (every
/// variable, two hyperslabs when the block wraps) is a single job, so it never interleaves
/// with another read, and it checks that the dimensions still have the lengths seen at open.
/// `Dataset` is therefore `Send + Sync`: share it in an `Arc` and call it from many threads.
/// Library work is serialised (as it must be); unpacking and reordering run on the calling
/// thread, and the arrays come back as owned `f32` data for parallel computing afterwards.
pub struct Dataset {
    path: PathBuf,
    /// `Some` for the dataset's whole life; taken by `Drop` to close it on the netCDF thread.
    file: Option<Arc<netcdf::File>>,
    format: &'static str,
    grid: Grid,
    levels: Levels,
    level_units: String,
    lat_descending: bool,
    levels_ascending_in_file: bool,
    lon_map: LonMap,
    n_lat: usize,
    n_level: usize,
    times: Vec<String>,
    time_keys: Vec<i128>,
    n_steps: usize,
    calendar: Calendar,
    time_units: Option<String>,
    time_var: Option<String>,
    recognised: Vec<Recognised>,
    fields: Vec<FieldVar>,
}

/// Runs library calls on the netCDF thread ([`io::run`]), turning a panic inside the
/// `netcdf` crate (it unwraps some library errors) into [`CfError::Damaged`].
fn on_io<T, F>(path: &Path, what: &str, f: F) -> Result<T, CfError>
where
    T: Send + 'static,
    F: FnOnce() -> T + Send + 'static,
{
    io::run(f).map_err(|msg| CfError::Damaged {
        file: path.to_path_buf(),
        reason: format!("the netCDF library failed while {what} ({msg})"),
    })
}

/// Reads every value of a variable as `f64`.
fn read_all(path: &Path, file: &Arc<netcdf::File>, name: &str) -> Result<Vec<f64>, CfError> {
    let (file, owned) = (Arc::clone(file), name.to_string());
    on_io(path, "reading a coordinate", move || {
        file.variable(&owned)
            .ok_or_else(|| netcdf::Error::NotFound(owned.clone()))
            .and_then(|var| var.get_values::<f64, _>(..))
    })?
    .map_err(|source| CfError::Read {
        file: path.to_path_buf(),
        variable: name.to_string(),
        source,
    })
}

fn core_err(path: &Path, what: &'static str) -> impl FnOnce(shearbox_core::CoreError) -> CfError {
    let file = path.to_path_buf();
    move |source| CfError::Core { file, what, source }
}

impl Dataset {
    /// Opens a file: reads its header and coordinates (never a data variable), recognises
    /// the variables and normalises the coordinates.
    pub fn open(path: &Path, overrides: &VarOverrides) -> Result<Dataset, CfError> {
        let file_err = |source| CfError::Io { file: path.to_path_buf(), source };
        std::fs::metadata(path).map_err(file_err)?;
        let (magic, check) = format::inspect(path).map_err(file_err)?;
        // A classic file whose own header does not fit is refused before the library sees
        // it: netCDF-C would size its tables from the damaged counts (seconds of work and
        // gigabytes of memory for one flipped byte) before failing.
        if let Err(reason) = check {
            return Err(CfError::Damaged { file: path.to_path_buf(), reason });
        }
        let owned = path.to_path_buf();
        let opened = on_io(path, "opening the file", move || {
            netcdf::open(&owned).map(|f| {
                let vars = meta::scan(&f);
                (Arc::new(f), vars)
            })
        })?;
        let (file, vars) = match opened {
            Ok(x) => x,
            Err(source) => return Err(CfError::Open { file: path.to_path_buf(), source }),
        };
        let mut file = Some(file);
        let built = Self::build(path, &mut file, magic, &vars, overrides);
        if let Some(f) = file {
            // Not taken by a dataset (an error): close it on the netCDF thread.
            io::drop_there(f);
        }
        built
    }

    fn build(
        path: &Path,
        file: &mut Option<Arc<netcdf::File>>,
        magic: Magic,
        vars: &[VarMeta],
        overrides: &VarOverrides,
    ) -> Result<Dataset, CfError> {
        let coord = |role: Role| -> Result<Option<Coord>, CfError> {
            Ok(recognise::coordinate(path, vars, overrides, role)?
                .map(|Match { index, matched_by }| Coord { index, matched_by }))
        };
        let missing = |role: Role| CfError::MissingVariable {
            file: path.to_path_buf(),
            role,
            tried: role.tried(),
        };
        let lat_c = coord(Role::Latitude)?.ok_or_else(|| missing(Role::Latitude))?;
        let lon_c = coord(Role::Longitude)?.ok_or_else(|| missing(Role::Longitude))?;
        let lev_c = coord(Role::Level)?.ok_or_else(|| missing(Role::Level))?;
        let time_c = coord(Role::Time)?;

        let one_d = |c: &Coord, role: Role| -> Result<String, CfError> {
            let v = &vars[c.index];
            if v.dims.len() != 1 {
                return Err(CfError::Dimensions {
                    file: path.to_path_buf(),
                    variable: v.name.clone(),
                    dims: v.dims_text(),
                    reason: format!(
                        "a {} must have exactly one dimension (curvilinear grids are not \
                         supported)",
                        role.description()
                    ),
                });
            }
            Ok(v.dims[0].0.clone())
        };
        let lat_dim = one_d(&lat_c, Role::Latitude)?;
        let lon_dim = one_d(&lon_c, Role::Longitude)?;
        let lev_dim = one_d(&lev_c, Role::Level)?;
        let distinct = [&lat_dim, &lon_dim, &lev_dim];
        if distinct[0] == distinct[1] || distinct[0] == distinct[2] || distinct[1] == distinct[2] {
            let v = &vars[lat_c.index];
            return Err(CfError::Dimensions {
                file: path.to_path_buf(),
                variable: v.name.clone(),
                dims: v.dims_text(),
                reason: format!(
                    "latitude ({}), longitude ({}) and level ({}) must have distinct \
                     dimensions",
                    lat_dim, lon_dim, lev_dim
                ),
            });
        }
        let time_dim = match &time_c {
            Some(c) => {
                let v = &vars[c.index];
                match v.dims.len() {
                    0 => None,
                    1 => Some(v.dims[0].0.clone()),
                    _ => {
                        return Err(CfError::Dimensions {
                            file: path.to_path_buf(),
                            variable: v.name.clone(),
                            dims: v.dims_text(),
                            reason: "a time coordinate must be a scalar or have one dimension"
                                .to_string(),
                        });
                    }
                }
            }
            None => None,
        };

        // Coordinate values.
        let read_coord = |c: &Coord| -> Result<Vec<f64>, CfError> {
            let v = &vars[c.index];
            let packing = Packing::from_meta(path, v)?;
            let handle = file.as_ref().ok_or_else(|| CfError::Damaged {
                file: path.to_path_buf(),
                reason: "internal: the file handle is gone".to_string(),
            })?;
            let raw = read_all(path, handle, &v.name)?;
            Ok(raw.into_iter().map(|x| packing.value(x)).collect())
        };
        let not_mono =
            |c: &Coord, role: Role, (index, prev, next): (usize, f64, f64)| CfError::NotMonotonic {
                file: path.to_path_buf(),
                variable: vars[c.index].name.clone(),
                role,
                index,
                prev,
                next,
            };
        let mut recognised = Vec::new();
        let mut record = |role: Role, c: &Coord, conversion: String| {
            let v = &vars[c.index];
            recognised.push(Recognised {
                role,
                variable: v.name.clone(),
                units: v.units().to_string(),
                conversion,
                matched_by: c.matched_by.to_string(),
            });
        };

        // Latitude.
        let lat_v = &vars[lat_c.index];
        if !units::is_degrees(lat_v.units(), Role::Latitude) {
            return Err(CfError::WrongUnits {
                file: path.to_path_buf(),
                variable: lat_v.name.clone(),
                role: Role::Latitude,
                found: lat_v.units().to_string(),
                accepted: units::accepted(Role::Latitude).to_string(),
            });
        }
        let mut lat = read_coord(&lat_c)?;
        let lat_descending = direction(&lat).map_err(|e| not_mono(&lat_c, Role::Latitude, e))?;
        if lat_descending {
            lat.reverse();
        }
        record(
            Role::Latitude,
            &lat_c,
            if lat_descending { "reordered north->south to south->north" } else { "none" }
                .to_string(),
        );

        // Longitude.
        let lon_v = &vars[lon_c.index];
        if !units::is_degrees(lon_v.units(), Role::Longitude) {
            return Err(CfError::WrongUnits {
                file: path.to_path_buf(),
                variable: lon_v.name.clone(),
                role: Role::Longitude,
                found: lon_v.units().to_string(),
                accepted: units::accepted(Role::Longitude).to_string(),
            });
        }
        let lon_file = read_coord(&lon_c)?;
        let (lon_map, lon) =
            normalise_lon(&lon_file).map_err(|e| not_mono(&lon_c, Role::Longitude, e))?;
        let mut lon_conv = Vec::new();
        if lon_map.n < lon_file.len() {
            lon_conv.push("duplicated cyclic column dropped".to_string());
        }
        if lon_map.descending {
            lon_conv.push("reversed to increasing".to_string());
        }
        if lon_map.rot != 0 {
            lon_conv.push(format!("rotated to start at {}", lon[0]));
        }
        record(
            Role::Longitude,
            &lon_c,
            if lon_conv.is_empty() { "none".to_string() } else { lon_conv.join("; ") },
        );
        let grid = Grid::new(lat.clone(), lon).map_err(core_err(path, "building the grid"))?;

        // Levels.
        let lev_v = &vars[lev_c.index];
        let level_units = lev_v.units().to_string();
        let (factor, unit_name) =
            units::pressure(&level_units).ok_or_else(|| CfError::WrongUnits {
                file: path.to_path_buf(),
                variable: lev_v.name.clone(),
                role: Role::Level,
                found: level_units.clone(),
                accepted: units::PRESSURE_ACCEPTED.to_string(),
            })?;
        let lev_file = read_coord(&lev_c)?;
        let lev_desc = direction(&lev_file).map_err(|e| not_mono(&lev_c, Role::Level, e))?;
        // Bottom-up is decreasing pressure: a file in increasing pressure is reversed.
        let levels_ascending_in_file = !lev_desc && lev_file.len() > 1;
        let mut pa: Vec<f64> = lev_file.iter().map(|p| p * factor).collect();
        if levels_ascending_in_file {
            pa.reverse();
        }
        let levels = Levels::from_pa(pa).map_err(core_err(path, "building the levels"))?;
        let mut lev_conv = Vec::new();
        if factor != 1.0 {
            lev_conv.push(format!("{unit_name} -> Pa"));
        }
        if levels_ascending_in_file {
            lev_conv.push("reordered top-down to bottom-up".to_string());
        }
        record(
            Role::Level,
            &lev_c,
            if lev_conv.is_empty() { "none".to_string() } else { lev_conv.join("; ") },
        );

        // Time.
        let (mut times, mut time_keys, mut calendar, mut time_units, mut time_var) =
            (Vec::new(), Vec::new(), Calendar::Standard, None, None);
        let mut n_steps = 1;
        if let Some(c) = &time_c {
            let v = &vars[c.index];
            let name = v.name.clone();
            let cal =
                calendar::parse_calendar(v.text("calendar")).map_err(|e| e.in_file(path, &name))?;
            let units_text = v.units().to_string();
            let parsed = calendar::parse_units(&units_text).map_err(|e| e.in_file(path, &name))?;
            let values = read_coord(c)?;
            for value in &values {
                let dt = calendar::decode_with(*value, &parsed, cal)
                    .map_err(|e| e.in_file(path, &name))?;
                time_keys.push(calendar::instant(&dt, cal).unwrap_or(0));
                times.push(dt.to_iso());
            }
            n_steps = if v.dims.is_empty() { 1 } else { values.len() };
            calendar = cal;
            time_units = Some(units_text);
            time_var = Some(name);
            record(Role::Time, c, format!("decoded ({} calendar)", cal.cf_name()));
        }

        // Fields.
        let coord_indices = [
            Some(lat_c.index),
            Some(lon_c.index),
            Some(lev_c.index),
            time_c.as_ref().map(|c| c.index),
        ];
        let mut used: Vec<usize> = coord_indices.iter().flatten().copied().collect();
        let cdims = CoordDims { lat: &lat_dim, lon: &lon_dim, level: &lev_dim };
        let mut fields = Vec::new();
        for role in Role::ALL.into_iter().filter(|r| !r.is_coordinate()) {
            let Some(m) = recognise::field(path, vars, overrides, role, &cdims, &used)? else {
                continue;
            };
            used.push(m.index);
            let v = &vars[m.index];
            let mut kinds = Vec::new();
            let mut counts = [0usize; 4];
            for (dname, dlen) in &v.dims {
                let kind = if *dname == lat_dim {
                    DimKind::Lat
                } else if *dname == lon_dim {
                    DimKind::Lon
                } else if *dname == lev_dim && role.is_3d() {
                    DimKind::Level
                } else if time_dim.as_deref() == Some(dname.as_str()) {
                    DimKind::Time
                } else if *dlen == 1 {
                    DimKind::Single
                } else {
                    return Err(CfError::Dimensions {
                        file: path.to_path_buf(),
                        variable: v.name.clone(),
                        dims: v.dims_text(),
                        reason: format!(
                            "dimension {dname:?} (length {dlen}) is none of latitude \
                             ({lat_dim}), longitude ({lon_dim}), {}time ({}); extra \
                             dimensions must have length 1",
                            if role.is_3d() {
                                format!("level ({lev_dim}), ")
                            } else {
                                String::new()
                            },
                            time_dim.as_deref().unwrap_or("none")
                        ),
                    });
                };
                match kind {
                    DimKind::Lat => counts[0] += 1,
                    DimKind::Lon => counts[1] += 1,
                    DimKind::Level => counts[2] += 1,
                    DimKind::Time => counts[3] += 1,
                    DimKind::Single => {}
                }
                kinds.push(kind);
            }
            let need_level = usize::from(role.is_3d());
            if counts[0] != 1 || counts[1] != 1 || counts[2] != need_level || counts[3] > 1 {
                return Err(CfError::Dimensions {
                    file: path.to_path_buf(),
                    variable: v.name.clone(),
                    dims: v.dims_text(),
                    reason: format!(
                        "a {} field needs the dimensions {lat_dim}, {lon_dim}{} once each \
                         (time {} optional)",
                        role.description(),
                        if role.is_3d() { format!(", {lev_dim}") } else { String::new() },
                        time_dim.as_deref().unwrap_or("-")
                    ),
                });
            }
            let expected = |kind: DimKind| match kind {
                DimKind::Lat => lat.len(),
                DimKind::Lon => lon_file.len(),
                DimKind::Level => lev_file.len(),
                DimKind::Time => n_steps,
                DimKind::Single => 1,
            };
            for (k, (dname, dlen)) in kinds.iter().zip(&v.dims) {
                if *dlen != expected(*k) {
                    return Err(CfError::Dimensions {
                        file: path.to_path_buf(),
                        variable: v.name.clone(),
                        dims: v.dims_text(),
                        reason: format!(
                            "dimension {dname:?} has length {dlen}, its coordinate has {}",
                            expected(*k)
                        ),
                    });
                }
            }
            let packing = Packing::from_meta(path, v)?;
            let found_units = v.units().to_string();
            let (conv, conv_text) =
                units::field_conversion(role, &found_units, v.text("standard_name")).ok_or_else(
                    || CfError::WrongUnits {
                        file: path.to_path_buf(),
                        variable: v.name.clone(),
                        role,
                        found: found_units.clone(),
                        accepted: units::accepted(role).to_string(),
                    },
                )?;
            let conversion = match (packing.describe(), conv) {
                (Some(p), Conv::None) => p,
                (Some(p), _) => format!("{p}; {conv_text}"),
                (None, _) => conv_text,
            };
            recognised.push(Recognised {
                role,
                variable: v.name.clone(),
                units: found_units,
                conversion,
                matched_by: m.matched_by.to_string(),
            });
            fields.push(FieldVar {
                role,
                name: v.name.clone(),
                kinds,
                lens: v.dims.iter().map(|d| d.1).collect(),
                packing,
                conv,
            });
        }
        let has = |r: Role| fields.iter().any(|f| f.role == r);
        if !has(Role::Geopotential) && !has(Role::Temperature) {
            return Err(CfError::NoThicknessInput {
                file: path.to_path_buf(),
                tried_geopotential: Role::Geopotential.tried(),
                tried_temperature: Role::Temperature.tried(),
            });
        }
        Ok(Dataset {
            path: path.to_path_buf(),
            file: file.take(),
            format: magic.name(),
            n_lat: lat.len(),
            n_level: lev_file.len(),
            grid,
            levels,
            level_units,
            lat_descending,
            levels_ascending_in_file,
            lon_map,
            times,
            time_keys,
            n_steps,
            calendar,
            time_units,
            time_var,
            recognised,
            fields,
        })
    }

    /// The file's path as given to [`Dataset::open`].
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// The file format: `"classic"`, `"64-bit offset"`, `"64-bit data (CDF-5)"`,
    /// `"netCDF-4"` or `"netCDF-4 classic model"`.
    pub fn format(&self) -> &'static str {
        self.format
    }

    /// The whole normalised grid (latitudes south to north, longitudes increasing modulo
    /// 360° with the file's own values).
    pub fn grid(&self) -> &Grid {
        &self.grid
    }

    /// The pressure levels, bottom-up, in Pa.
    pub fn levels(&self) -> &Levels {
        &self.levels
    }

    /// The level coordinate's units as in the file.
    pub fn level_units(&self) -> &str {
        &self.level_units
    }

    /// Whether the file stores latitudes north to south.
    pub fn latitude_descending(&self) -> bool {
        self.lat_descending
    }

    /// The time steps as ISO 8601 UTC (`YYYY-MM-DDTHH:MM:SSZ`, fractional seconds only
    /// when nonzero), in file order.
    ///
    /// A file without a time coordinate has **no** entries here but still one step to read:
    /// [`Dataset::n_steps`] is 1, `time_index(&TimeSelector::Latest)` is 0 and
    /// `read_fields(0, ..)` reads it. A scalar time coordinate gives one entry.
    pub fn times(&self) -> &[String] {
        &self.times
    }

    /// Number of time steps that can be read (1 for a file without a time dimension, 0 for
    /// a time dimension without records).
    pub fn n_steps(&self) -> usize {
        self.n_steps
    }

    /// The time coordinate's calendar ([`Calendar::Standard`] when absent).
    pub fn calendar(&self) -> Calendar {
        self.calendar
    }

    /// The time coordinate's units as in the file, if there is a time coordinate.
    pub fn time_units(&self) -> Option<&str> {
        self.time_units.as_deref()
    }

    /// The time coordinate's variable name, if any.
    pub fn time_variable(&self) -> Option<&str> {
        self.time_var.as_deref()
    }

    /// Number of values one time step of the whole grid decodes to: every field read, at
    /// every level for a field on levels (its `f32` size is four times this).
    pub fn values_per_step(&self) -> usize {
        let cells = self.grid.n_lat() * self.grid.n_lon();
        self.fields.iter().map(|f| if f.role.is_3d() { self.n_level * cells } else { cells }).sum()
    }

    /// What was recognised: coordinates first, then fields, with units and conversions.
    pub fn recognised(&self) -> &[Recognised] {
        &self.recognised
    }

    /// Whether a role was recognised.
    pub fn has(&self, role: Role) -> bool {
        self.recognised.iter().any(|r| r.role == role)
    }

    fn variable_of(&self, role: Role) -> Option<&str> {
        self.recognised.iter().find(|r| r.role == role).map(|r| r.variable.as_str())
    }

    /// Which diagnostics the file's variables allow, and why not when they do not.
    pub fn diagnostics(&self) -> Vec<Capability> {
        let absent = |role: Role| {
            format!(
                "no {} (tried: {}; set --var {}=NAME)",
                role.description(),
                role.tried(),
                role.key()
            )
        };
        let from = |role: Role| -> Result<String, String> {
            self.variable_of(role)
                .map(|v| format!("{} from {v}", role.key()))
                .ok_or_else(|| absent(role))
        };
        let layered = |r: Result<String, String>| -> Result<String, String> {
            if self.levels.len() < 2 {
                Err(format!("only {} pressure level; layers need at least two", self.levels.len()))
            } else {
                r
            }
        };
        let both = |a: Role, b: Role| -> Result<String, String> {
            match (from(a), from(b)) {
                (Ok(x), Ok(y)) => Ok(format!("{x}, {y}")),
                (Err(e), _) | (_, Err(e)) => Err(e),
            }
        };
        let either = |a: Role, b: Role| -> Result<String, String> {
            from(a).or_else(|ea| from(b).map_err(|eb| format!("{ea}; {eb}")))
        };
        let wind = || -> Result<String, String> { both(Role::EastwardWind, Role::NorthwardWind) };
        let layer_mean = || {
            from(Role::Temperature).map(|t| match self.variable_of(Role::SpecificHumidity) {
                Some(q) => format!("{t}; virtual temperature with humidity from {q}"),
                None => format!("{t}; dry (no specific humidity, so not virtual)"),
            })
        };
        let list: Vec<(&'static str, Result<String, String>)> = vec![
            ("geostrophic_wind", from(Role::Geopotential)),
            ("thickness_geopotential", layered(from(Role::Geopotential))),
            ("thickness_temperature", layered(from(Role::Temperature))),
            ("thermal_wind", layered(either(Role::Geopotential, Role::Temperature))),
            ("layer_mean_temperature", layered(layer_mean())),
            ("temperature_gradient", from(Role::Temperature)),
            ("baroclinic_torque", from(Role::Temperature)),
            ("balance_ratio", layered(both(Role::Geopotential, Role::Temperature))),
            ("thermal_advection", layered(from(Role::Geopotential))),
            ("static_stability", layered(from(Role::Temperature))),
            ("eady", layered(from(Role::Temperature))),
            ("observed_shear", layered(wind())),
            ("ageostrophic_shear", layered(wind())),
            ("below_ground_mask", either(Role::SurfacePressure, Role::SurfaceGeopotential)),
        ];
        list.into_iter()
            .map(|(name, r)| match r {
                Ok(reason) => Capability { name, possible: true, reason },
                Err(reason) => Capability { name, possible: false, reason },
            })
            .collect()
    }

    /// Each time step's instant, in file order: microseconds since day 0 of the file's
    /// [`Calendar`] ([`calendar::instant`]), comparable between files of the same calendar.
    /// Empty when the file has no time coordinate.
    pub fn time_instants(&self) -> &[i128] {
        &self.time_keys
    }

    /// The index of a time step (file order). `Latest` is the latest instant (the last
    /// step of the usual increasing time axis); `At` must match a step exactly (to the
    /// microsecond). A file without a time coordinate answers 0 to `Latest`.
    pub fn time_index(&self, sel: &TimeSelector) -> Result<usize, CfError> {
        if self.n_steps == 0 {
            return Err(CfError::NoTimeSteps {
                file: self.path.clone(),
                variable: self.time_var.clone().unwrap_or_default(),
            });
        }
        match sel {
            TimeSelector::Latest => {
                if self.time_keys.is_empty() {
                    return Ok(0);
                }
                let mut best = 0;
                for (i, k) in self.time_keys.iter().enumerate() {
                    if *k >= self.time_keys[best] {
                        best = i;
                    }
                }
                Ok(best)
            }
            TimeSelector::At(text) => {
                let wanted =
                    calendar::parse_iso(text).map(|d| d.to_iso()).unwrap_or_else(|_| text.clone());
                self.times.iter().position(|t| *t == wanted).ok_or_else(|| CfError::TimeNotFound {
                    file: self.path.clone(),
                    wanted,
                    first: self.times.first().cloned().unwrap_or_else(|| "(none)".into()),
                    last: self.times.last().cloned().unwrap_or_else(|| "(none)".into()),
                    count: self.times.len(),
                    calendar: self.calendar,
                })
            }
        }
    }

    /// Reads one time step of every recognised field on a block of the grid (`None`: the
    /// whole grid), normalised. Only the block is read: one hyperslab per variable, two when
    /// the block wraps around the file's column order. The result is identical to reading
    /// the whole grid and taking [`Fields::subset`].
    ///
    /// `sel` must come from this dataset's grid ([`Grid::select`], possibly with
    /// [`Selection::with_halo`]) and have at least two rows and two columns.
    pub fn read_fields(&self, time_idx: usize, sel: Option<&Selection>) -> Result<Fields, CfError> {
        if self.n_steps == 0 {
            return Err(CfError::NoTimeSteps {
                file: self.path.clone(),
                variable: self.time_var.clone().unwrap_or_default(),
            });
        }
        if time_idx >= self.n_steps {
            return Err(CfError::TimeIndexOutOfRange {
                file: self.path.clone(),
                index: time_idx,
                count: self.n_steps,
            });
        }
        let n_lon = self.grid.n_lon();
        let (rows, col_start, col_len) = match sel {
            None => (0..self.n_lat, 0, n_lon),
            Some(s) => (s.rows.clone(), s.cols.start, s.cols.len),
        };
        let bad = |reason: String| CfError::Selection { file: self.path.clone(), reason };
        if rows.start >= rows.end || rows.end > self.n_lat {
            return Err(bad(format!(
                "rows {}..{} are not within the grid's {} rows",
                rows.start, rows.end, self.n_lat
            )));
        }
        if col_start >= n_lon || col_len == 0 || col_len > n_lon {
            return Err(bad(format!(
                "columns start {col_start}, count {col_len} are not within the grid's {n_lon} \
                 columns"
            )));
        }
        if !self.grid.is_periodic() && col_start + col_len > n_lon {
            return Err(bad("the columns wrap around a grid that is not periodic".into()));
        }
        if let Some(s) = sel {
            if s.col_indices().enumerate().any(|(k, c)| c != (col_start + k) % n_lon) {
                return Err(bad("the selection was made for a grid of another width".into()));
            }
        }
        if rows.len() < 2 || col_len < 2 {
            return Err(bad(format!(
                "the block has {} row(s) and {col_len} column(s); at least 2 of each are \
                 needed (use Selection::with_halo)",
                rows.len()
            )));
        }
        let lat_sub = self.grid.lat()[rows.clone()].to_vec();
        let lon_sub: Vec<f64> =
            (0..col_len).map(|k| self.grid.lon()[(col_start + k) % n_lon]).collect();
        let grid =
            Grid::new(lat_sub, lon_sub).map_err(core_err(&self.path, "building the block grid"))?;

        let row_run = if self.lat_descending {
            Run { start: self.n_lat - rows.end, len: rows.len(), reverse: true }
        } else {
            Run { start: rows.start, len: rows.len(), reverse: false }
        };
        let col_runs = self.lon_map.runs(col_start, col_len);

        let pair = self.has(Role::EastwardWind) && self.has(Role::NorthwardWind);
        let to_read: Vec<FieldVar> = self
            .fields
            .iter()
            .filter(|fv| pair || !matches!(fv.role, Role::EastwardWind | Role::NorthwardWind))
            .cloned()
            .collect();
        // One job on the netCDF thread reads every hyperslab of the block; unpacking and
        // reordering happen here, on the caller's thread.
        let file = Arc::clone(self.file.as_ref().ok_or_else(|| CfError::Damaged {
            file: self.path.clone(),
            reason: "internal: the file handle is gone".to_string(),
        })?);
        let plan = to_read.clone();
        let (n_level, runs) = (self.n_level, col_runs.clone());
        let raw = on_io(&self.path, "reading a block", move || {
            plan.iter()
                .map(|fv| read_pieces(&file, fv, time_idx, n_level, row_run, &runs))
                .collect::<Vec<_>>()
        })?;
        let mut arrays: Vec<(Role, ArrayD<f32>)> = Vec::new();
        for (fv, pieces) in to_read.iter().zip(raw) {
            let pieces = pieces.map_err(|e| match e {
                ReadFail::Library(source) => {
                    CfError::Read { file: self.path.clone(), variable: fv.name.clone(), source }
                }
                ReadFail::Changed(lens) => CfError::Damaged {
                    file: self.path.clone(),
                    reason: format!(
                        "variable {:?} has dimension lengths {lens:?}, {:?} at open: the file \
                         changed while open",
                        fv.name, fv.lens
                    ),
                },
            })?;
            arrays.push((fv.role, self.assemble(fv, &pieces, row_run, &col_runs)?));
        }
        let mut b = FieldsBuilder::new(grid, self.levels.clone());
        let mut u = None;
        let mut v = None;
        for (role, a) in arrays {
            let shape_err = |a: &ArrayD<f32>| CfError::Damaged {
                file: self.path.clone(),
                reason: format!("internal: array of {role} has shape {:?}", a.shape()),
            };
            if role.is_3d() {
                let a3: Array3<f32> = a.into_dimensionality().map_err(|e| CfError::Damaged {
                    file: self.path.clone(),
                    reason: format!("internal: {role}: {e}"),
                })?;
                match role {
                    Role::Geopotential => b = b.geopotential_height(a3),
                    Role::Temperature => b = b.temperature(a3),
                    Role::SpecificHumidity => b = b.specific_humidity(a3),
                    Role::EastwardWind => u = Some(a3),
                    Role::NorthwardWind => v = Some(a3),
                    _ => {}
                }
            } else {
                let a2: Array2<f32> = a.clone().into_dimensionality().map_err(|_| shape_err(&a))?;
                match role {
                    Role::SurfacePressure => b = b.surface_pressure(a2),
                    Role::SurfaceGeopotential => b = b.surface_height(a2),
                    _ => {}
                }
            }
        }
        if let (Some(u), Some(v)) = (u, v) {
            b = b.wind(u, v);
        }
        b.build().map_err(core_err(&self.path, "assembling the fields"))
    }

    /// Puts one variable's pieces into `[level, lat, lon]` or `[lat, lon]` order, joins
    /// them along longitude and converts the values.
    fn assemble(
        &self,
        fv: &FieldVar,
        pieces: &[ArrayD<f64>],
        rows: Run,
        cols: &[Run],
    ) -> Result<ArrayD<f32>, CfError> {
        // Axes of each piece: the non-indexed dimensions in file order.
        let kept: Vec<DimKind> = fv
            .kinds
            .iter()
            .copied()
            .filter(|k| matches!(k, DimKind::Level | DimKind::Lat | DimKind::Lon))
            .collect();
        let target: &[DimKind] = if fv.role.is_3d() {
            &[DimKind::Level, DimKind::Lat, DimKind::Lon]
        } else {
            &[DimKind::Lat, DimKind::Lon]
        };
        let perm: Vec<usize> =
            target.iter().filter_map(|k| kept.iter().position(|x| x == k)).collect();
        if perm.len() != target.len() || kept.len() != target.len() {
            return Err(CfError::Damaged {
                file: self.path.clone(),
                reason: format!("internal: variable {:?} has unexpected axes", fv.name),
            });
        }
        let lat_axis = target.len() - 2;
        let lon_axis = target.len() - 1;
        let mut views = Vec::with_capacity(pieces.len());
        for (piece, c) in pieces.iter().zip(cols) {
            if piece.ndim() != target.len() {
                return Err(CfError::Damaged {
                    file: self.path.clone(),
                    reason: format!(
                        "variable {:?}: the library returned {} axes, expected {}",
                        fv.name,
                        piece.ndim(),
                        target.len()
                    ),
                });
            }
            let mut view = piece.view().permuted_axes(IxDyn(&perm));
            if fv.role.is_3d() && self.levels_ascending_in_file {
                view.invert_axis(Axis(0));
            }
            if rows.reverse {
                view.invert_axis(Axis(lat_axis));
            }
            if c.reverse {
                view.invert_axis(Axis(lon_axis));
            }
            views.push(view);
        }
        let convert = |raw: &[f64]| fv.packing.convert_slice(fv.conv, raw);
        // The usual case, one piece already in the kernel's axis order, is converted straight
        // from the library's buffer; otherwise the pieces are joined (and reordered) first.
        // Either way the values are walked as a contiguous slice: element-wise iteration of a
        // dynamic-rank array costs more than the conversion itself.
        if let [only] = views.as_slice() {
            if let Some(slice) = only.as_slice() {
                let data = convert(slice);
                return ArrayD::from_shape_vec(IxDyn(only.shape()), data).map_err(|e| {
                    CfError::Damaged { file: self.path.clone(), reason: format!("internal: {e}") }
                });
            }
        }
        let joined =
            ndarray::concatenate(Axis(lon_axis), &views).map_err(|e| CfError::Damaged {
                file: self.path.clone(),
                reason: format!("internal: joining the column pieces of {:?}: {e}", fv.name),
            })?;
        let shape = joined.shape().to_vec();
        let data = match joined.as_slice() {
            Some(slice) => convert(slice),
            None => convert(&joined.iter().copied().collect::<Vec<f64>>()),
        };
        ArrayD::from_shape_vec(IxDyn(&shape), data).map_err(|e| CfError::Damaged {
            file: self.path.clone(),
            reason: format!("internal: {e}"),
        })
    }
}

/// Why reading a variable's pieces failed.
enum ReadFail {
    /// The library returned an error.
    Library(netcdf::Error),
    /// The dimensions no longer have the lengths seen at open.
    Changed(Vec<usize>),
}

/// Reads the hyperslabs of one variable for one time step: one per column run. Runs on the
/// netCDF thread.
fn read_pieces(
    file: &netcdf::File,
    fv: &FieldVar,
    t: usize,
    n_level: usize,
    rows: Run,
    cols: &[Run],
) -> Result<Vec<ArrayD<f64>>, ReadFail> {
    let var = file
        .variable(&fv.name)
        .ok_or_else(|| ReadFail::Library(netcdf::Error::NotFound(fv.name.clone())))?;
    let lens: Vec<usize> = var.dimensions().iter().map(|d| d.len()).collect();
    if lens != fv.lens {
        return Err(ReadFail::Changed(lens));
    }
    cols.iter()
        .map(|c| {
            let extents: Vec<Extent> = fv
                .kinds
                .iter()
                .map(|k| match k {
                    DimKind::Time => Extent::Index(t),
                    DimKind::Single => Extent::Index(0),
                    DimKind::Level => Extent::SliceCount { start: 0, count: n_level, stride: 1 },
                    DimKind::Lat => {
                        Extent::SliceCount { start: rows.start, count: rows.len, stride: 1 }
                    }
                    DimKind::Lon => Extent::SliceCount { start: c.start, count: c.len, stride: 1 },
                })
                .collect();
            var.get::<f64, _>(extents).map_err(ReadFail::Library)
        })
        .collect()
}

impl Drop for Dataset {
    fn drop(&mut self) {
        if let Some(file) = self.file.take() {
            io::drop_there(file);
        }
    }
}

const _: () = {
    const fn assert_send_sync<T: Send + Sync>() {}
    assert_send_sync::<Dataset>();
};

#[cfg(test)]
mod tests {
    use super::*;

    /// The per-slice conversion gives the same bits as the per-value definition, for every
    /// kind of packing and unit conversion, on values that include the fill, NaN, values
    /// outside a valid range, a missing value and signed zeros.
    #[test]
    fn slice_conversion_equals_the_per_value_definition() {
        let raw = [0.0, -0.0, 1.5, -32767.0, 32767.0, f64::NAN, 12.25, -7.0, 9.96921e36, 250.0];
        let base = Packing {
            dtype: DType::I16,
            scale: 1.0,
            offset: 0.0,
            packed: false,
            fill: Some(-32767.0),
            missing: Vec::new(),
            valid_min: None,
            valid_max: None,
        };
        let packings = [
            base.clone(),
            Packing { fill: None, ..base.clone() },
            Packing { scale: 0.01, offset: 273.15, packed: true, ..base.clone() },
            Packing { missing: vec![-7.0], ..base.clone() },
            Packing { valid_min: Some(-10.0), valid_max: Some(100.0), ..base.clone() },
            Packing { dtype: DType::F32, fill: Some(9.96921e36), ..base.clone() },
        ];
        let convs = [Conv::None, Conv::Div(100.0), Conv::Mul(9.80665), Conv::Add(273.15)];
        for p in &packings {
            for &conv in &convs {
                let fast = p.convert_slice(conv, &raw);
                let slow: Vec<f32> = raw.iter().map(|&x| conv.apply(p.value(x)) as f32).collect();
                let bits = |v: &[f32]| v.iter().map(|x| x.to_bits()).collect::<Vec<_>>();
                let nan = |v: &[f32]| v.iter().map(|x| x.is_nan()).collect::<Vec<_>>();
                assert_eq!(nan(&fast), nan(&slow), "{p:?} {conv:?}");
                let finite =
                    |v: &[f32]| v.iter().filter(|x| !x.is_nan()).copied().collect::<Vec<f32>>();
                assert_eq!(bits(&finite(&fast)), bits(&finite(&slow)), "{p:?} {conv:?}");
            }
        }
    }
}
