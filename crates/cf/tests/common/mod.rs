//! Shared helpers: CDL text → netCDF file with `ncgen`, in a temporary directory.

#![allow(dead_code)]

use std::path::{Path, PathBuf};
use std::process::Command;

/// Result type of the tests: every failure is an error, never a panic inside a helper.
pub type TestResult = Result<(), Box<dyn std::error::Error>>;

/// Writes `cdl` and runs `ncgen -k <kind>` on it (kind `nc3`, `nc6`, `nc4`, `nc7`).
pub fn ncgen(dir: &Path, name: &str, kind: &str, cdl: &str) -> Result<PathBuf, Box<dyn std::error::Error>> {
    let cdl_path = dir.join(format!("{name}.cdl"));
    let nc_path = dir.join(format!("{name}.nc"));
    std::fs::write(&cdl_path, cdl)?;
    let out = Command::new("ncgen").arg("-k").arg(kind).arg("-o").arg(&nc_path).arg(&cdl_path).output()?;
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
        if !$cond {
            return Err(format!("{}:{}: {}", file!(), line!(), format!($($msg)+)).into());
        }
    };
}
