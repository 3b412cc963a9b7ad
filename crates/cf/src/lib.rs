//! # shearbox-cf
//!
//! The only crate of the workspace that links the netCDF-C library (through the `netcdf`
//! crate). Under construction: recognition, normalisation and reading of CF pressure-level
//! files.

/// The `netcdf` crate, re-exported for the workspace's fixture generator, which writes files
/// byte for byte in layouts the reader must handle. Everything else reads through this crate's
/// typed API.
pub use netcdf;
