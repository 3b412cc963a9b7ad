//! A plain-data snapshot of a file's metadata, taken once at open.
//!
//! Recognition works on this snapshot, not on live library handles, so that it is ordinary
//! Rust (testable, no library calls) and the library is only entered to scan the header and,
//! later, to read hyperslabs.

use netcdf::AttributeValue;
use netcdf::types::{FloatType, IntType, NcVariableType};

/// An attribute value: text or numbers.
#[derive(Debug, Clone, PartialEq)]
pub(crate) enum Attr {
    /// Text (`NC_CHAR` or `NC_STRING`; several strings are joined with a space).
    Text(String),
    /// Numbers, converted to `f64` (exact for every netCDF numeric type but 64-bit integers
    /// beyond 2⁵³).
    Num(Vec<f64>),
}

/// The numeric type of a variable.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum DType {
    I8,
    U8,
    I16,
    U16,
    I32,
    U32,
    I64,
    U64,
    F32,
    F64,
}

impl DType {
    pub(crate) fn name(self) -> &'static str {
        match self {
            DType::I8 => "int8",
            DType::U8 => "uint8",
            DType::I16 => "int16",
            DType::U16 => "uint16",
            DType::I32 => "int32",
            DType::U32 => "uint32",
            DType::I64 => "int64",
            DType::U64 => "uint64",
            DType::F32 => "float32",
            DType::F64 => "float64",
        }
    }

    /// The netCDF default fill value of the type, which marks never-written values when a
    /// variable has no `_FillValue` attribute. `None` for the byte types, where (as in the
    /// netCDF users' guide and netCDF4-python) no default applies.
    pub(crate) fn default_fill(self) -> Option<f64> {
        match self {
            DType::I8 | DType::U8 => None,
            DType::I16 => Some(-32767.0),
            DType::U16 => Some(65535.0),
            DType::I32 => Some(-2147483647.0),
            DType::U32 => Some(4294967295.0),
            DType::I64 => Some(-9223372036854775806.0),
            DType::U64 => Some(18446744073709551614.0),
            DType::F32 => Some(f64::from(9.969_21e36_f32)),
            DType::F64 => Some(9.969_209_968_386_869e36),
        }
    }
}

/// One variable: name, dimensions, type and attributes.
#[derive(Debug, Clone)]
pub(crate) struct VarMeta {
    pub name: String,
    /// `(dimension name, length)` in file order.
    pub dims: Vec<(String, usize)>,
    /// `None` for non-numeric types (char, string, compound...).
    pub dtype: Option<DType>,
    pub attrs: Vec<(String, Attr)>,
}

impl VarMeta {
    pub(crate) fn attr(&self, name: &str) -> Option<&Attr> {
        self.attrs.iter().find(|(n, _)| n == name).map(|(_, a)| a)
    }

    /// A text attribute, trimmed.
    pub(crate) fn text(&self, name: &str) -> Option<&str> {
        match self.attr(name)? {
            Attr::Text(s) => Some(s.trim()),
            Attr::Num(_) => None,
        }
    }

    /// The `units` attribute, `""` when absent.
    pub(crate) fn units(&self) -> &str {
        self.text("units").unwrap_or("")
    }

    /// Whether this is a coordinate variable: one dimension with the variable's own name.
    pub(crate) fn is_coordinate_variable(&self) -> bool {
        self.dims.len() == 1 && self.dims[0].0 == self.name
    }

    /// `name=len, ...` for messages.
    pub(crate) fn dims_text(&self) -> String {
        if self.dims.is_empty() {
            return "() (scalar)".to_string();
        }
        let inner: Vec<String> = self.dims.iter().map(|(n, l)| format!("{n}={l}")).collect();
        format!("({})", inner.join(", "))
    }
}

pub(crate) fn dtype_of(t: &NcVariableType) -> Option<DType> {
    Some(match t {
        NcVariableType::Int(IntType::I8) => DType::I8,
        NcVariableType::Int(IntType::U8) => DType::U8,
        NcVariableType::Int(IntType::I16) => DType::I16,
        NcVariableType::Int(IntType::U16) => DType::U16,
        NcVariableType::Int(IntType::I32) => DType::I32,
        NcVariableType::Int(IntType::U32) => DType::U32,
        NcVariableType::Int(IntType::I64) => DType::I64,
        NcVariableType::Int(IntType::U64) => DType::U64,
        NcVariableType::Float(FloatType::F32) => DType::F32,
        NcVariableType::Float(FloatType::F64) => DType::F64,
        _ => return None,
    })
}

pub(crate) fn attr_of(v: AttributeValue) -> Option<Attr> {
    use AttributeValue as A;
    let nums = |v: Vec<f64>| Some(Attr::Num(v));
    match v {
        A::Uchar(x) => nums(vec![f64::from(x)]),
        A::Uchars(x) => nums(x.into_iter().map(f64::from).collect()),
        A::Schar(x) => nums(vec![f64::from(x)]),
        A::Schars(x) => nums(x.into_iter().map(f64::from).collect()),
        A::Ushort(x) => nums(vec![f64::from(x)]),
        A::Ushorts(x) => nums(x.into_iter().map(f64::from).collect()),
        A::Short(x) => nums(vec![f64::from(x)]),
        A::Shorts(x) => nums(x.into_iter().map(f64::from).collect()),
        A::Uint(x) => nums(vec![f64::from(x)]),
        A::Uints(x) => nums(x.into_iter().map(f64::from).collect()),
        A::Int(x) => nums(vec![f64::from(x)]),
        A::Ints(x) => nums(x.into_iter().map(f64::from).collect()),
        A::Ulonglong(x) => nums(vec![x as f64]),
        A::Ulonglongs(x) => nums(x.into_iter().map(|v| v as f64).collect()),
        A::Longlong(x) => nums(vec![x as f64]),
        A::Longlongs(x) => nums(x.into_iter().map(|v| v as f64).collect()),
        A::Float(x) => nums(vec![f64::from(x)]),
        A::Floats(x) => nums(x.into_iter().map(f64::from).collect()),
        A::Double(x) => nums(vec![x]),
        A::Doubles(x) => nums(x),
        A::Str(s) => Some(Attr::Text(s)),
        A::Strs(s) => Some(Attr::Text(s.join(" "))),
    }
}

/// Scans every variable of the root group. Attributes whose value the library cannot read
/// are skipped (they are reported only if recognition needs them).
pub(crate) fn scan(file: &netcdf::File) -> Vec<VarMeta> {
    file.variables()
        .map(|var| {
            let dims = var.dimensions().iter().map(|d| (d.name(), d.len())).collect();
            let dtype = dtype_of(&var.vartype());
            let attrs = var
                .attributes()
                .filter_map(|a| {
                    let name = a.name().to_string();
                    let value = a.value().ok().and_then(attr_of)?;
                    Some((name, value))
                })
                .collect();
            VarMeta { name: var.name(), dims, dtype, attrs }
        })
        .collect()
}
