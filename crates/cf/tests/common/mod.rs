//! Shared helpers: CDL text → netCDF file with `ncgen`, in a temporary directory.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// Result type of the tests: every failure is an error, never a panic inside a helper.
pub type TestResult = Result<(), Box<dyn std::error::Error>>;

/// Writes `cdl` and runs `ncgen -k <kind>` on it (kind `nc3`, `nc6`, `nc4`, `nc7`).
pub fn ncgen(
    dir: &Path,
    name: &str,
    kind: &str,
    cdl: &str,
) -> Result<PathBuf, Box<dyn std::error::Error>> {
    let cdl_path = dir.join(format!("{name}.cdl"));
    let nc_path = dir.join(format!("{name}.nc"));
    std::fs::write(&cdl_path, cdl)?;
    let out = Command::new("ncgen")
        .arg("-k")
        .arg(kind)
        .arg("-o")
        .arg(&nc_path)
        .arg(&cdl_path)
        .output()?;
    if !out.status.success() {
        return Err(format!("ncgen failed: {}", String::from_utf8_lossy(&out.stderr)).into());
    }
    Ok(nc_path)
}

/// A fresh temporary directory.
pub fn tmp() -> Result<tempfile::TempDir, Box<dyn std::error::Error>> {
    Ok(tempfile::tempdir()?)
}

/// Formats a list of numbers for CDL.
pub fn list<T: std::fmt::Display>(v: impl IntoIterator<Item = T>) -> String {
    v.into_iter().map(|x| x.to_string()).collect::<Vec<_>>().join(", ")
}

/// Checks a condition, returning an error with a message instead of panicking.
#[macro_export]
macro_rules! ensure {
    ($cond:expr, $($msg:tt)+) => {
        let ok: bool = $cond;
        if !ok {
            return Err(format!("{}:{}: {}", file!(), line!(), format!($($msg)+)).into());
        }
    };
}

/// One variable of a CDL file.
#[derive(Clone, Debug)]
pub struct Var {
    /// Name.
    pub name: String,
    /// CDL type: `float`, `double`, `short`, `int`, `byte`, `ubyte`.
    pub ty: String,
    /// Dimension names, file order.
    pub dims: Vec<String>,
    /// Attributes as CDL value text (`"\"K\""`, `0.5`, `-32767s`).
    pub attrs: Vec<(String, String)>,
    /// Data as CDL value text (`_` for fill), row-major over `dims`.
    pub data: Vec<String>,
}

impl Var {
    /// A variable without attributes or data.
    pub fn new(name: &str, ty: &str, dims: &[&str]) -> Var {
        Var {
            name: name.into(),
            ty: ty.into(),
            dims: dims.iter().map(|d| d.to_string()).collect(),
            attrs: Vec::new(),
            data: Vec::new(),
        }
    }

    /// Adds a text attribute.
    pub fn text(mut self, name: &str, value: &str) -> Var {
        self.attrs.push((name.into(), format!("{value:?}")));
        self
    }

    /// Adds an attribute written as raw CDL (numbers with type suffixes).
    pub fn raw(mut self, name: &str, value: &str) -> Var {
        self.attrs.push((name.into(), value.into()));
        self
    }

    /// Sets the data from numbers.
    pub fn values(mut self, v: &[f64]) -> Var {
        self.data = v.iter().map(|x| x.to_string()).collect();
        self
    }
}

/// A CDL file: dimensions (`None` = unlimited with the given number of records) and
/// variables.
#[derive(Clone, Debug, Default)]
pub struct Cdl {
    /// `(name, length, unlimited)`.
    pub dims: Vec<(String, usize, bool)>,
    /// Variables.
    pub vars: Vec<Var>,
}

impl Cdl {
    /// Adds a fixed dimension.
    pub fn dim(mut self, name: &str, len: usize) -> Cdl {
        self.dims.push((name.into(), len, false));
        self
    }

    /// Adds an unlimited dimension (its length is the number of records written).
    pub fn unlimited(mut self, name: &str, len: usize) -> Cdl {
        self.dims.push((name.into(), len, true));
        self
    }

    /// Adds a variable.
    pub fn var(mut self, v: Var) -> Cdl {
        self.vars.push(v);
        self
    }

    /// Length of a dimension.
    pub fn len_of(&self, dim: &str) -> usize {
        self.dims.iter().find(|d| d.0 == dim).map(|d| d.1).unwrap_or(0)
    }

    /// Fills a variable's data from a function of its indices (in the variable's own
    /// dimension order), formatted by `fmt`.
    pub fn fill(mut self, name: &str, f: impl Fn(&[usize]) -> String) -> Cdl {
        let Some(pos) = self.vars.iter().position(|v| v.name == name) else { return self };
        let lens: Vec<usize> = self.vars[pos].dims.iter().map(|d| self.len_of(d)).collect();
        let total: usize = lens.iter().product();
        let mut data = Vec::with_capacity(total);
        let mut idx = vec![0usize; lens.len()];
        for _ in 0..total {
            data.push(f(&idx));
            for k in (0..lens.len()).rev() {
                idx[k] += 1;
                if idx[k] < lens[k] {
                    break;
                }
                idx[k] = 0;
            }
        }
        self.vars[pos].data = data;
        self
    }

    /// The CDL text.
    pub fn render(&self) -> String {
        let mut s = String::from("netcdf test {\ndimensions:\n");
        for (name, len, unlimited) in &self.dims {
            if *unlimited {
                s += &format!("  {name} = UNLIMITED ; // ({len} currently)\n");
            } else {
                s += &format!("  {name} = {len} ;\n");
            }
        }
        s += "variables:\n";
        for v in &self.vars {
            let dims =
                if v.dims.is_empty() { String::new() } else { format!("({})", v.dims.join(", ")) };
            s += &format!("  {} {}{dims} ;\n", v.ty, v.name);
            for (a, val) in &v.attrs {
                s += &format!("    {}:{a} = {val} ;\n", v.name);
            }
        }
        s += "data:\n";
        for v in &self.vars {
            if !v.data.is_empty() {
                s += &format!("  {} = {} ;\n", v.name, v.data.join(", "));
            }
        }
        s += "}\n";
        s
    }

    /// Writes the file with `ncgen -k kind`.
    pub fn write(
        &self,
        dir: &Path,
        name: &str,
        kind: &str,
    ) -> Result<PathBuf, Box<dyn std::error::Error>> {
        ncgen(dir, name, kind, &self.render())
    }
}

/// The coordinates of a standard test file.
#[derive(Clone, Debug)]
pub struct Axes {
    /// Latitudes, file order.
    pub lat: Vec<f64>,
    /// Longitudes, file order.
    pub lon: Vec<f64>,
    /// Levels in file units, file order.
    pub lev: Vec<f64>,
    /// Level units.
    pub lev_units: String,
    /// Time values.
    pub time: Vec<f64>,
}

impl Axes {
    /// A small periodic grid: lat −30..30 step 15 (S→N), lon 0..270 step 90, levels
    /// 1000, 850, 500 hPa, two times.
    pub fn small() -> Axes {
        Axes {
            lat: vec![-30.0, -15.0, 0.0, 15.0, 30.0],
            lon: vec![0.0, 90.0, 180.0, 270.0],
            lev: vec![1000.0, 850.0, 500.0],
            lev_units: "hPa".into(),
            time: vec![0.0, 6.0],
        }
    }

    /// The coordinate part of a CDL file with dims `time`, `level`, `lat`, `lon`.
    pub fn cdl(&self) -> Cdl {
        Cdl::default()
            .unlimited("time", self.time.len())
            .dim("level", self.lev.len())
            .dim("lat", self.lat.len())
            .dim("lon", self.lon.len())
            .var(
                Var::new("time", "double", &["time"])
                    .text("units", "hours since 2026-01-15 00:00:00")
                    .values(&self.time),
            )
            .var(
                Var::new("level", "double", &["level"])
                    .text("units", &self.lev_units)
                    .values(&self.lev),
            )
            .var(
                Var::new("lat", "double", &["lat"])
                    .text("units", "degrees_north")
                    .values(&self.lat),
            )
            .var(
                Var::new("lon", "double", &["lon"]).text("units", "degrees_east").values(&self.lon),
            )
    }
}

/// The test pattern: a distinct value for every (time, level, lat, lon) file index.
pub fn pattern(t: usize, k: usize, j: usize, i: usize) -> f64 {
    1000.0 * t as f64 + 100.0 * k as f64 + 10.0 * j as f64 + i as f64 + 0.25
}

/// Fills a field variable with [`pattern`] (plus `base`), whatever its dimension order.
pub fn fill_pattern(cdl: Cdl, name: &str, base: f64) -> Cdl {
    let dims: Vec<String> =
        cdl.vars.iter().find(|v| v.name == name).map(|v| v.dims.clone()).unwrap_or_default();
    cdl.fill(name, move |idx| {
        let get = |d: &str| dims.iter().position(|x| x == d).map(|p| idx[p]).unwrap_or(0);
        (base + pattern(get("time"), get("level"), get("lat"), get("lon"))).to_string()
    })
}

/// Index in `file` of the value equal to `value` (coordinates are copied unchanged).
pub fn file_index(file: &[f64], value: f64) -> Result<usize, Box<dyn std::error::Error>> {
    file.iter()
        .position(|x| *x == value)
        .ok_or_else(|| format!("{value} not among {file:?}").into())
}
