//! # shearbox-server
//!
//! The edge of shearbox that speaks JSON: the wire types of the profile and dataset documents
//! ([`wire`]), and the box query that turns a file, a box and a time into a profile
//! ([`query`]). The `shearbox profile` and `shearbox inspect` commands print exactly these
//! documents, so the command line and the service cannot drift apart.
//!
//! Kernel types carry no serialisation; [`wire`] converts them explicitly, turning every
//! undefined value into `null` and SI units into the units named in each field.

pub mod query;
pub mod wire;

/// The short caution every document carries.
pub const CAUTION: &str = "Diagnostic computed from model or reanalysis data; not an official \
forecast or warning. Defer to your national weather service's products and your own procedures.";
