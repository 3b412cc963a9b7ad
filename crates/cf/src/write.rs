//! Writing NetCDF-4 files one time step at a time, and reading them back step by step.
//!
//! A file is described up front by a [`Header`]: dimensions (one of them the unlimited time
//! dimension), variables with their attributes, the values of every variable that does not
//! vary in time, and global attributes. [`OutputFile::create`] defines all of it and writes
//! the static values; [`OutputFile::write_step`] then appends one time step of every
//! time-varying variable, so memory holds one step, never the whole file.
//!
//! Storage policy, the same for every file this crate writes: time-varying variables of
//! three or more dimensions are chunked one time step × one layer (or level) × the whole
//! horizontal grid, so a reader of one map touches one chunk, and compressed with the
//! header's deflate level and the shuffle filter; their missing values are the NetCDF default
//! fill value for `float` ([`FILL_F32`]), declared as `_FillValue`.
//!
//! [`PartFile`] reads such a file back: its header (so that several files can be joined
//! into one with the same definitions) and one time step of one variable at a time.
//!
//! Every library call runs on the crate's netCDF thread, like the reader's.

use std::path::{Path, PathBuf};
use std::sync::Arc;

use crate::error::CfError;
use rayon::prelude::*;

use crate::chunks;
use crate::io;

/// The NetCDF default fill value of `float` (`NC_FILL_FLOAT`), used for masked cells.
pub const FILL_F32: f32 = f32::from_bits(0x7cf0_0000); // 9.96921e36

/// An attribute value.
#[derive(Debug, Clone, PartialEq)]
pub enum AttrValue {
    /// Text.
    Text(String),
    /// One `double`.
    Double(f64),
    /// Several `double`s.
    Doubles(Vec<f64>),
    /// One `float`.
    Float(f32),
    /// One `int`.
    Int(i32),
}

impl From<&str> for AttrValue {
    fn from(s: &str) -> Self {
        AttrValue::Text(s.to_string())
    }
}

impl From<String> for AttrValue {
    fn from(s: String) -> Self {
        AttrValue::Text(s)
    }
}

impl From<f64> for AttrValue {
    fn from(x: f64) -> Self {
        AttrValue::Double(x)
    }
}

/// The stored type of a variable.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum VarType {
    /// 32-bit float (every diagnostic).
    F32,
    /// 64-bit float (coordinates, time).
    F64,
}

/// One variable of a [`Header`].
#[derive(Debug, Clone, PartialEq)]
pub struct VarDef {
    /// Variable name.
    pub name: String,
    /// Dimension names, outermost first.
    pub dims: Vec<String>,
    /// Stored type.
    pub var_type: VarType,
    /// Attributes other than `_FillValue`, in order.
    pub attrs: Vec<(String, AttrValue)>,
    /// The values of a variable without the time dimension (row-major), written when the
    /// file is created; `None` for time-varying variables.
    pub data: Option<Vec<f64>>,
}

impl VarDef {
    /// A variable with no attributes yet.
    pub fn new(name: &str, dims: &[&str], var_type: VarType) -> Self {
        Self {
            name: name.to_string(),
            dims: dims.iter().map(|d| d.to_string()).collect(),
            var_type,
            attrs: Vec::new(),
            data: None,
        }
    }

    /// Adds an attribute.
    pub fn attr(mut self, name: &str, value: impl Into<AttrValue>) -> Self {
        self.attrs.push((name.to_string(), value.into()));
        self
    }

    /// Sets the values of a static variable.
    pub fn values(mut self, data: Vec<f64>) -> Self {
        self.data = Some(data);
        self
    }

    /// The attribute `name`, if present.
    pub fn attribute(&self, name: &str) -> Option<&AttrValue> {
        self.attrs.iter().find(|(n, _)| n == name).map(|(_, v)| v)
    }
}

/// Everything that defines a file before its first time step.
#[derive(Debug, Clone, PartialEq)]
pub struct Header {
    /// The unlimited time dimension's name.
    pub time_dim: String,
    /// The fixed dimensions, name and length.
    pub dims: Vec<(String, usize)>,
    /// Variables, in definition order.
    pub vars: Vec<VarDef>,
    /// Global attributes, in order.
    pub global_attrs: Vec<(String, AttrValue)>,
    /// Deflate level (1–9) for the chunked variables; `None` stores them uncompressed.
    pub deflate: Option<i32>,
}

impl Header {
    /// The length of dimension `name` (the time dimension counts as 1: one step).
    fn dim_len(&self, name: &str) -> Option<usize> {
        if name == self.time_dim {
            return Some(1);
        }
        self.dims.iter().find(|(n, _)| n == name).map(|(_, l)| *l)
    }

    /// Whether `var` varies in time.
    pub fn is_time_varying(&self, var: &VarDef) -> bool {
        var.dims.first().is_some_and(|d| *d == self.time_dim)
    }

    /// The values one time step of `var` holds (product of its dimensions but time).
    pub fn step_len(&self, var: &VarDef) -> usize {
        var.dims.iter().skip(1).map(|d| self.dim_len(d).unwrap_or(0)).product()
    }

    /// The global attribute `name`, if present.
    pub fn global(&self, name: &str) -> Option<&AttrValue> {
        self.global_attrs.iter().find(|(n, _)| n == name).map(|(_, v)| v)
    }

    /// Checks the header's internal consistency: known dimensions, static values of the
    /// right length, time-varying variables with time first.
    fn check(&self, path: &Path) -> Result<(), CfError> {
        let bad = |what: String| CfError::Write { file: path.to_path_buf(), what, source: None };
        for v in &self.vars {
            for (i, d) in v.dims.iter().enumerate() {
                if self.dim_len(d).is_none() {
                    return Err(bad(format!("variable {} uses unknown dimension {d}", v.name)));
                }
                if *d == self.time_dim && i > 0 {
                    return Err(bad(format!("variable {}: time must come first", v.name)));
                }
            }
            let n: usize = v.dims.iter().map(|d| self.dim_len(d).unwrap_or(0)).product();
            match (&v.data, self.is_time_varying(v)) {
                (Some(data), false) if data.len() == n => {}
                (None, true) => {}
                _ => {
                    return Err(bad(format!(
                        "variable {}: static values are needed exactly when it has no time \
                         dimension ({} values for {n} cells)",
                        v.name,
                        v.data.as_ref().map_or(0, Vec::len)
                    )));
                }
            }
        }
        Ok(())
    }
}

fn to_nc(value: &AttrValue) -> netcdf::AttributeValue {
    match value {
        AttrValue::Text(s) => netcdf::AttributeValue::Str(s.clone()),
        AttrValue::Double(x) => netcdf::AttributeValue::Double(*x),
        AttrValue::Doubles(x) => netcdf::AttributeValue::Doubles(x.clone()),
        AttrValue::Float(x) => netcdf::AttributeValue::Float(*x),
        AttrValue::Int(x) => netcdf::AttributeValue::Int(*x),
    }
}

fn from_nc(value: netcdf::AttributeValue) -> Option<AttrValue> {
    Some(match value {
        netcdf::AttributeValue::Str(s) => AttrValue::Text(s),
        netcdf::AttributeValue::Strs(s) if s.len() == 1 => AttrValue::Text(s[0].clone()),
        netcdf::AttributeValue::Double(x) => AttrValue::Double(x),
        netcdf::AttributeValue::Doubles(x) => AttrValue::Doubles(x),
        netcdf::AttributeValue::Float(x) => AttrValue::Float(x),
        netcdf::AttributeValue::Int(x) => AttrValue::Int(x),
        _ => return None,
    })
}

/// What the system last reported, with what to check: the library's "HDF error" says little,
/// the system's error (disk full, file too large) says what to do.
pub(crate) fn disk_hint() -> String {
    let os = std::io::Error::last_os_error();
    let check = "check the free space and file size limits of the output's disk";
    match os.raw_os_error() {
        Some(0) | None => check.to_string(),
        _ => format!("the system last reported: {os}; {check}"),
    }
}

fn lib_err(path: &Path, what: impl Into<String>) -> impl FnOnce(netcdf::Error) -> CfError {
    let (file, what) = (path.to_path_buf(), what.into());
    move |e| CfError::Write { file, what, source: Some(Box::new(e)) }
}

fn io_err(path: &Path, what: &str) -> impl FnOnce(String) -> CfError {
    let (file, what) = (path.to_path_buf(), what.to_string());
    move |msg| CfError::Write {
        file,
        what: format!("{what} (the netCDF library failed: {msg})"),
        source: None,
    }
}

/// Defines every dimension, variable and attribute of `header` in a new file and writes
/// the static values.
fn define(path: &Path, header: &Header) -> Result<netcdf::FileMut, CfError> {
    let mut file = netcdf::create_with(path, netcdf::Options::NETCDF4)
        .map_err(lib_err(path, "creating the file"))?;
    file.add_unlimited_dimension(&header.time_dim)
        .map_err(lib_err(path, "defining the time dimension"))?;
    for (name, len) in &header.dims {
        file.add_dimension(name, *len)
            .map_err(lib_err(path, format!("defining dimension {name}")))?;
    }
    for v in &header.vars {
        let dims: Vec<&str> = v.dims.iter().map(String::as_str).collect();
        let what = format!("defining variable {}", v.name);
        let mut var = match v.var_type {
            VarType::F32 => file.add_variable::<f32>(&v.name, &dims),
            VarType::F64 => file.add_variable::<f64>(&v.name, &dims),
        }
        .map_err(lib_err(path, what.clone()))?;
        if header.is_time_varying(v) && v.dims.len() >= 3 {
            let n = v.dims.len();
            let chunk: Vec<usize> = v
                .dims
                .iter()
                .enumerate()
                .map(|(i, d)| if i + 2 >= n { header.dim_len(d).unwrap_or(1) } else { 1 })
                .collect();
            var.set_chunking(&chunk).map_err(lib_err(path, what.clone()))?;
            if let Some(level) = header.deflate {
                var.set_compression(level, true).map_err(lib_err(path, what.clone()))?;
            }
            if v.var_type == VarType::F32 {
                var.set_fill_value(FILL_F32).map_err(lib_err(path, what.clone()))?;
            }
        }
        for (name, value) in &v.attrs {
            var.put_attribute(name, to_nc(value)).map_err(lib_err(path, what.clone()))?;
        }
    }
    for (name, value) in &header.global_attrs {
        file.add_attribute(name, to_nc(value))
            .map_err(lib_err(path, format!("writing global attribute {name}")))?;
    }
    for v in &header.vars {
        let Some(data) = &v.data else { continue };
        let what = format!("writing variable {}", v.name);
        let mut var = file.variable_mut(&v.name).ok_or_else(|| CfError::Write {
            file: path.to_path_buf(),
            what: what.clone(),
            source: None,
        })?;
        match v.var_type {
            VarType::F64 => var.put_values(data, ..),
            VarType::F32 => {
                let data: Vec<f32> = data.iter().map(|x| *x as f32).collect();
                var.put_values(&data, ..)
            }
        }
        .map_err(lib_err(path, what))?;
    }
    Ok(file)
}

/// How the chunks of the gridded variables reach the file.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Writer {
    /// Compressed on all cores by the caller and appended as finished chunks through HDF5
    /// (module `chunks`): the fast path.
    #[default]
    Direct,
    /// Written through the netCDF library, which compresses them on one thread under its
    /// lock: the reference path.
    Library,
}

/// The open file of either writer.
enum Backend {
    Library(netcdf::FileMut),
    Direct(chunks::Direct),
}

/// Writes one step through the library.
fn put_step(
    file: &mut netcdf::FileMut,
    time_dim: &str,
    t: usize,
    time_value: f64,
    values: &[(String, Vec<f32>)],
) -> Result<(), netcdf::Error> {
    let mut tv =
        file.variable_mut(time_dim).ok_or_else(|| netcdf::Error::NotFound(time_dim.to_string()))?;
    tv.put_values(&[time_value], t..t + 1)?;
    for (name, data) in values {
        let mut var =
            file.variable_mut(name).ok_or_else(|| netcdf::Error::NotFound(name.clone()))?;
        let n_dims = var.dimensions().len();
        let mut extents: Vec<std::ops::Range<usize>> = Vec::with_capacity(n_dims);
        extents.push(t..t + 1);
        for d in &var.dimensions()[1..n_dims] {
            extents.push(0..d.len());
        }
        var.put_values(data, extents.as_slice())?;
    }
    Ok(())
}

/// A file being written, one time step at a time. Dropping it without [`Self::close`]
/// closes the file too; the caller decides what happens to an unfinished file.
pub struct OutputFile {
    path: PathBuf,
    header: Header,
    /// `Some` until closed; moved to the netCDF thread for every call.
    file: Option<Backend>,
    steps: usize,
}

impl std::fmt::Debug for OutputFile {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("OutputFile").field("path", &self.path).field("steps", &self.steps).finish()
    }
}

impl OutputFile {
    /// Creates (or truncates) the NetCDF-4 file `path` with everything `header` defines,
    /// written through the netCDF library ([`Writer::Library`]).
    pub fn create(path: &Path, header: Header) -> Result<Self, CfError> {
        Self::create_with(path, header, Writer::Library)
    }

    /// Creates the file with the chosen [`Writer`]. [`Writer::Direct`] needs every
    /// time-varying variable but the time coordinate to have at least three dimensions.
    pub fn create_with(path: &Path, header: Header, writer: Writer) -> Result<Self, CfError> {
        header.check(path)?;
        let (p, h) = (path.to_path_buf(), header.clone());
        let file = io::run(move || define(&p, &h)).map_err(io_err(path, "defining the file"))??;
        let backend = match writer {
            Writer::Library => Backend::Library(file),
            Writer::Direct => {
                let vars: Vec<(String, Vec<usize>)> = header
                    .vars
                    .iter()
                    .filter(|v| header.is_time_varying(v) && v.name != header.time_dim)
                    .map(|v| {
                        let shape = v.dims[1..].iter().map(|d| header.dim_len(d).unwrap_or(0));
                        (v.name.clone(), shape.collect())
                    })
                    .collect();
                if let Some((name, _)) = vars.iter().find(|(_, s)| s.len() < 2) {
                    return Err(CfError::Write {
                        file: path.to_path_buf(),
                        what: format!(
                            "variable {name} has fewer than three dimensions: write it with the \
                             library writer"
                        ),
                        source: None,
                    });
                }
                let (p, time, level) =
                    (path.to_path_buf(), header.time_dim.clone(), header.deflate);
                let direct = io::run(move || {
                    file.close().map_err(|e| format!("closing the defined file: {e}"))?;
                    chunks::Direct::open(&p, &time, &vars, level)
                })
                .map_err(io_err(path, "opening the file for chunk writes"))?
                .map_err(|what| CfError::Write {
                    file: path.to_path_buf(),
                    what,
                    source: None,
                })?;
                Backend::Direct(direct)
            }
        };
        Ok(Self { path: path.to_path_buf(), header, file: Some(backend), steps: 0 })
    }

    /// The header the file was created with.
    pub fn header(&self) -> &Header {
        &self.header
    }

    /// The time steps written so far.
    pub fn steps(&self) -> usize {
        self.steps
    }

    /// Appends one time step: the time coordinate's value and, for every time-varying
    /// variable other than the time coordinate, its values of this step (row-major over
    /// the dimensions after time, `NaN` where undefined: stored as [`FILL_F32`]). Every
    /// time-varying variable must be given exactly once.
    pub fn write_step(
        &mut self,
        time_value: f64,
        values: Vec<(String, Vec<f32>)>,
    ) -> Result<(), CfError> {
        self.write_step_returning(time_value, values).map(drop)
    }

    /// [`Self::write_step`], giving the value buffers back (emptied, with their capacity) for
    /// the next step to fill: a run over many steps then allocates them once instead of
    /// faulting in fresh pages every step.
    pub fn write_step_returning(
        &mut self,
        time_value: f64,
        mut values: Vec<(String, Vec<f32>)>,
    ) -> Result<Vec<(String, Vec<f32>)>, CfError> {
        let bad = |what: String| CfError::Write { file: self.path.clone(), what, source: None };
        let time_dim = self.header.time_dim.clone();
        let expected: Vec<&VarDef> = self
            .header
            .vars
            .iter()
            .filter(|v| self.header.is_time_varying(v) && v.name != time_dim)
            .collect();
        if values.len() != expected.len() {
            return Err(bad(format!(
                "a time step needs {} variables, {} were given",
                expected.len(),
                values.len()
            )));
        }
        for (name, data) in &mut values {
            let Some(def) = expected.iter().find(|v| v.name == *name) else {
                return Err(bad(format!(
                    "variable {name} is not a time-varying variable of the file"
                )));
            };
            if data.len() != self.header.step_len(def) {
                return Err(bad(format!(
                    "variable {name}: {} values given, one step holds {}",
                    data.len(),
                    self.header.step_len(def)
                )));
            }
            for x in data.iter_mut() {
                if x.is_nan() {
                    *x = FILL_F32;
                }
            }
        }
        let backend = self.file.take().ok_or_else(|| bad("the file is already closed".into()))?;
        let (path, t) = (self.path.clone(), self.steps);
        let (result, backend) = match backend {
            Backend::Library(file) => {
                let (result, file, returned) = io::run(move || {
                    let mut file = file;
                    let result = put_step(&mut file, &time_dim, t, time_value, &values);
                    (result, file, values)
                })
                .map_err(io_err(&path, "writing a time step"))?;
                values = returned;
                (
                    result.map_err(|e| CfError::Write {
                        file: path.clone(),
                        what: format!("writing time step {t} ({})", disk_hint()),
                        source: Some(Box::new(e)),
                    }),
                    Backend::Library(file),
                )
            }
            Backend::Direct(mut direct) => {
                // Shuffle and deflate every chunk on all cores, off the library's lock; the
                // netCDF thread only appends the bytes.
                let mut ordered: Vec<Vec<f32>> = Vec::with_capacity(values.len());
                let mut slots: Vec<usize> = Vec::with_capacity(values.len());
                for i in 0..values.len() {
                    let name = direct.var_name(i).to_string();
                    let at = values.iter().position(|(n, _)| *n == name).ok_or_else(|| {
                        bad(format!("variable {name} is missing from the time step"))
                    })?;
                    ordered.push(std::mem::take(&mut values[at].1));
                    slots.push(at);
                }
                let level = direct.level();
                let jobs: Vec<(usize, usize, usize)> = (0..ordered.len())
                    .flat_map(|i| {
                        let (n, len) = direct.chunking(i);
                        (0..n).map(move |k| (i, k, len))
                    })
                    .collect();
                let encoded: Vec<chunks::Encoded> = jobs
                    .par_iter()
                    .map(|&(i, k, len)| chunks::encode(&ordered[i][k * len..(k + 1) * len], level))
                    .collect();
                for (buffer, at) in ordered.into_iter().zip(slots) {
                    values[at].1 = buffer;
                }
                let mut grouped: Vec<Vec<chunks::Encoded>> = vec![Vec::new(); values.len()];
                for ((i, _, _), e) in jobs.iter().zip(encoded) {
                    grouped[*i].push(e);
                }
                let (result, direct) = io::run(move || {
                    let result = direct.write_step(t, time_value, &grouped);
                    (result, direct)
                })
                .map_err(io_err(&path, "writing a time step"))?;
                let result = result.map_err(|what| CfError::Write {
                    file: path.clone(),
                    what,
                    source: None,
                });
                (result, Backend::Direct(direct))
            }
        };
        self.file = Some(backend);
        result?;
        self.steps += 1;
        for (_, buffer) in &mut values {
            buffer.clear();
        }
        Ok(values)
    }

    /// Flushes and closes the file.
    pub fn close(mut self) -> Result<(), CfError> {
        let Some(backend) = self.file.take() else { return Ok(()) };
        let path = self.path.clone();
        match backend {
            Backend::Library(file) => io::run(move || file.close())
                .map_err(io_err(&path, "closing the file"))?
                .map_err(lib_err(&path, "closing the file")),
            Backend::Direct(direct) => io::run(move || direct.close())
                .map_err(io_err(&path, "closing the file"))?
                .map_err(|what| CfError::Write { file: path.clone(), what, source: None }),
        }
    }
}

impl Drop for OutputFile {
    fn drop(&mut self) {
        if let Some(file) = self.file.take() {
            io::drop_there(file);
        }
    }
}

/// A file written by [`OutputFile`], read back step by step (to join files along time).
pub struct PartFile {
    path: PathBuf,
    /// `Some` for the part's whole life; taken by `Drop` to close it on the netCDF thread.
    file: Option<Arc<netcdf::File>>,
    header: Header,
    times: Vec<f64>,
}

impl std::fmt::Debug for PartFile {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PartFile")
            .field("path", &self.path)
            .field("steps", &self.times.len())
            .finish()
    }
}

/// Reads the header and the time values of an open file.
fn read_header(path: &Path, file: &netcdf::File) -> Result<(Header, Vec<f64>), CfError> {
    let bad = |what: String| CfError::Write { file: path.to_path_buf(), what, source: None };
    let mut time_dim = None;
    let mut dims = Vec::new();
    for d in file.dimensions() {
        if d.is_unlimited() {
            time_dim = Some(d.name());
        } else {
            dims.push((d.name(), d.len()));
        }
    }
    let time_dim = time_dim.ok_or_else(|| {
        bad("no unlimited (time) dimension: not a file this program wrote".into())
    })?;
    let mut vars = Vec::new();
    for v in file.variables() {
        let name = v.name();
        let var_type = match v.vartype() {
            netcdf::types::NcVariableType::Float(netcdf::types::FloatType::F32) => VarType::F32,
            netcdf::types::NcVariableType::Float(netcdf::types::FloatType::F64) => VarType::F64,
            other => {
                return Err(bad(format!(
                    "variable {name} has type {other:?}: not a file this program wrote"
                )));
            }
        };
        let mut attrs = Vec::new();
        for a in v.attributes() {
            if a.name() == "_FillValue" {
                continue;
            }
            let value =
                a.value().map_err(lib_err(path, format!("reading attributes of {name}")))?;
            let value = from_nc(value).ok_or_else(|| {
                bad(format!("attribute {name}:{} has a type this program does not write", a.name()))
            })?;
            attrs.push((a.name().to_string(), value));
        }
        let var_dims: Vec<String> = v.dimensions().iter().map(|d| d.name()).collect();
        let data = if var_dims.first() == Some(&time_dim) {
            None
        } else {
            Some(v.get_values::<f64, _>(..).map_err(lib_err(path, format!("reading {name}")))?)
        };
        vars.push(VarDef { name, dims: var_dims, var_type, attrs, data });
    }
    let mut global_attrs = Vec::new();
    for a in file.attributes() {
        let value = a.value().map_err(lib_err(path, "reading global attributes"))?;
        let value = from_nc(value).ok_or_else(|| {
            bad(format!("global attribute {} has a type this program does not write", a.name()))
        })?;
        global_attrs.push((a.name().to_string(), value));
    }
    let times = match file.variable(&time_dim) {
        Some(v) => {
            v.get_values::<f64, _>(..).map_err(lib_err(path, "reading the time coordinate"))?
        }
        None => {
            return Err(bad(format!("no coordinate variable for the time dimension {time_dim}")));
        }
    };
    // The compression of the stored chunks is not read back: whoever writes a new file
    // from this header chooses its own.
    Ok((Header { time_dim, dims, vars, global_attrs, deflate: None }, times))
}

impl PartFile {
    /// Opens a file written by [`OutputFile`] and reads its header and time values.
    pub fn open(path: &Path) -> Result<Self, CfError> {
        std::fs::metadata(path)
            .map_err(|source| CfError::Io { file: path.to_path_buf(), source })?;
        let p = path.to_path_buf();
        let (file, header, times) = io::run(move || {
            let file =
                netcdf::open(&p).map_err(|e| CfError::Open { file: p.clone(), source: e })?;
            let (header, times) = read_header(&p, &file)?;
            Ok::<_, CfError>((file, header, times))
        })
        .map_err(io_err(path, "reading the header"))??;
        Ok(Self { path: path.to_path_buf(), file: Some(Arc::new(file)), header, times })
    }

    /// The file's header (with `deflate: None`: the stored compression is not read back).
    pub fn header(&self) -> &Header {
        &self.header
    }

    /// The time coordinate's values.
    pub fn times(&self) -> &[f64] {
        &self.times
    }

    /// The path.
    pub fn path(&self) -> &Path {
        &self.path
    }

    /// One time step of a time-varying `float` variable, fill values as `NaN`.
    pub fn read_step(&self, name: &str, step: usize) -> Result<Vec<f32>, CfError> {
        let file = Arc::clone(self.file.as_ref().ok_or_else(|| CfError::Write {
            file: self.path.clone(),
            what: "the file is closed".into(),
            source: None,
        })?);
        let (name_owned, path) = (name.to_string(), self.path.clone());
        let values = io::run(move || {
            let var = file
                .variable(&name_owned)
                .ok_or_else(|| netcdf::Error::NotFound(name_owned.clone()))?;
            let mut extents: Vec<std::ops::Range<usize>> =
                Vec::with_capacity(var.dimensions().len());
            extents.push(step..step + 1);
            extents.extend(var.dimensions()[1..].iter().map(|d| 0..d.len()));
            var.get_values::<f32, _>(extents.as_slice())
        })
        .map_err(io_err(&path, "reading a time step"))?
        .map_err(lib_err(&path, format!("reading step {step} of {name}")))?;
        Ok(values.into_iter().map(|x| if x == FILL_F32 { f32::NAN } else { x }).collect())
    }
}

impl Drop for PartFile {
    fn drop(&mut self) {
        if let Some(file) = self.file.take() {
            io::drop_there(file);
        }
    }
}
