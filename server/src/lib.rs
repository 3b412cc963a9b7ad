//! # shearbox-server
//!
//! The edge of shearbox that speaks JSON and HTTP: the wire types of the profile and dataset
//! documents ([`wire`]), the box query that turns a file, a box and a time into a profile
//! ([`query`]), and the service `shearbox serve` ([`app`]). The `shearbox profile` and
//! `shearbox inspect` commands print exactly these documents, through the same query code, so
//! the command line and the service cannot drift apart.
//!
//! Kernel types carry no serialisation; [`wire`] converts them explicitly, turning every
//! undefined value into `null` and SI units into the units named in each field.
//!
//! # The service
//!
//! - [`app::app`] builds the router from the state ([`state::AppState`]) with no socket;
//!   [`app::run`] serves it on a listener until a shutdown future completes.
//! - Files are opened once ([`catalog`]), from their headers alone; a box query reads its time
//!   step whole when the step is small beside the cache (later boxes of it are cut from
//!   that), otherwise only the box plus a one-cell halo, on a blocking thread (every netCDF call then runs on the reader's own
//!   I/O thread), computes there, and never on the async workers. A semaphore bounds the work
//!   running at once and a queue limit turns excess requests into `503` with `Retry-After`
//!   ([`state::WorkGate`]).
//! - Decoded inputs and finished answers are kept in an LRU bounded in bytes ([`cache`]);
//!   glibc's allocator is held to one arena per core so freed buffers do not pile up
//!   ([`memory`]).
//! - Changed files are reloaded in the background and swapped in atomically once they open
//!   and validate; requests in flight finish on the file they started with.
//! - Each connection lives under time and size limits ([`conn`]): a slow client cannot hold
//!   it open past the request time limit, and none holds a place of the work gate.
//! - Errors are typed ([`error::ApiError`]) and pick their status; a 5xx is logged, never
//!   echoed.
//! - A page at `/` ([`page`]), embedded in the binary, lets a person pick a dataset, time and
//!   layer, drag a box on the layer map and read its profile, through the public routes only.

pub mod api;
pub mod app;
pub mod cache;
pub mod catalog;
pub mod config;
pub mod conn;
pub mod error;
pub mod memory;
pub mod metrics;
pub mod page;
pub mod pictures;
pub mod query;
pub mod state;
pub mod wire;

/// The short caution every document carries.
pub const CAUTION: &str = "Diagnostic computed from model or reanalysis data; not an official \
forecast or warning. Defer to your national weather service's products and your own procedures.";
