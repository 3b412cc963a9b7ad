//! The `shearbox` command line: inspect a file, profile a box, compute every diagnostic of
//! many files into CF NetCDF (`compute`), join the parts of a sharded run (`join`), and draw
//! the hodograph and layer map as SVG (`plot`).
//!
//! Every command reads through `shearbox-cf`, computes with `shearbox-core`, and prints the
//! documents of `shearbox-server::wire`, so what the command line prints is what the service
//! returns.

mod args;
mod compute;
mod join;
mod plot;
mod staging;
mod table;

use std::io::Write;
use std::path::Path;
use std::process::ExitCode;

use anyhow::{Context, Result};
use clap::{Parser, Subcommand};
use shearbox_cf::{Dataset, VarOverrides};
use shearbox_core::Config;
use shearbox_server::query::{self, ProfileRequest};
use shearbox_server::wire::DatasetDoc;

use crate::args::{Format, parse_layer};

/// Thermal wind, thickness and baroclinicity from pressure-level NetCDF.
///
/// A diagnostic from model or reanalysis data, not an official forecast or warning.
#[derive(Debug, Parser)]
#[command(name = "shearbox", version, about, long_about = None)]
struct Cli {
    #[command(subcommand)]
    command: Command,
}

#[derive(Debug, Subcommand)]
enum Command {
    /// Show what was recognised in a file and which diagnostics it allows.
    Inspect {
        /// The NetCDF file.
        file: std::path::PathBuf,
        /// Print the dataset document as JSON.
        #[arg(long)]
        json: bool,
        /// Use variable NAME for ROLE (ROLE=NAME; roles: latitude, longitude, level, time,
        /// geopotential, temperature, u, v, humidity, surface_pressure, surface_geopotential).
        #[arg(long = "var", value_name = "ROLE=NAME")]
        vars: Vec<String>,
    },
    /// Box-mean profile of geostrophic and thermal wind for a box and a time.
    Profile {
        /// The NetCDF file.
        file: std::path::PathBuf,
        /// The box W,S,E,N in degrees (GeoJSON order); W > E crosses the antimeridian.
        #[arg(long, allow_hyphen_values = true)]
        bbox: String,
        /// The time: ISO 8601 or `latest`.
        #[arg(long, default_value = "latest")]
        time: String,
        /// One deep layer BOTTOM-TOP in hPa (for example 1000-500) instead of every adjacent
        /// layer.
        #[arg(long)]
        layer: Option<String>,
        /// Output format.
        #[arg(long, value_enum, default_value_t = Format::Json)]
        format: Format,
        /// Use variable NAME for ROLE (see `inspect --help`).
        #[arg(long = "var", value_name = "ROLE=NAME")]
        vars: Vec<String>,
        /// Half-width of the equatorial band, degrees, where balance-based quantities are
        /// masked.
        #[arg(long, default_value_t = 5.0)]
        equator_band: f64,
    },
    /// Every diagnostic of every time step of many files, into one CF NetCDF-4 file
    /// (streamed one step at a time; splits across a job array with --shard).
    Compute(compute::ComputeArgs),
    /// Join the parts of a sharded `compute` run along time into one file.
    Join(join::JoinArgs),
    /// Draw the hodograph and the layer map of boxes as SVG files, per region and time.
    Plot(plot::PlotArgs),
    /// Serve box queries over HTTP as JSON (the demo dataset when no data is given).
    Serve {
        /// A TOML configuration file: datasets, bind address, cache size, limits, CORS origins
        /// and bearer tokens.
        #[arg(long, value_name = "FILE")]
        config: Option<std::path::PathBuf>,
        /// A dataset NAME=PATH_OR_GLOB (repeatable); a glob serves its last match in name
        /// order and moves to newer files as they appear.
        #[arg(long = "data", value_name = "NAME=PATH_OR_GLOB")]
        data: Vec<String>,
        /// The address to listen on [default: 127.0.0.1:8080].
        #[arg(long, value_name = "ADDR")]
        bind: Option<String>,
    },
}

/// The run stopped on SIGINT, SIGTERM or SIGHUP (exit status 130).
#[derive(Debug)]
struct Interrupted;

impl std::fmt::Display for Interrupted {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("interrupted; no output was written and earlier outputs are unchanged")
    }
}

impl std::error::Error for Interrupted {}

fn main() -> ExitCode {
    let cli = Cli::parse();
    match run(cli) {
        Ok(()) => ExitCode::SUCCESS,
        Err(e) if e.is::<Interrupted>() => {
            eprintln!("\nshearbox: {e}");
            ExitCode::from(130)
        }
        Err(e) => {
            eprintln!("shearbox: error: {e:#}");
            ExitCode::FAILURE
        }
    }
}

fn overrides(vars: &[String]) -> Result<VarOverrides> {
    let mut o = VarOverrides::default();
    for v in vars {
        o.parse_arg(v)?;
    }
    Ok(o)
}

fn file_name(path: &Path) -> String {
    path.file_name().map_or_else(|| path.display().to_string(), |n| n.to_string_lossy().into())
}

fn run(cli: Cli) -> Result<()> {
    let mut out = std::io::stdout().lock();
    match cli.command {
        Command::Compute(args) => compute::run(args)?,
        Command::Join(args) => join::run(args)?,
        Command::Plot(args) => plot::run(args)?,
        Command::Serve { config, data, bind } => {
            shearbox_server::app::serve_blocking(&shearbox_server::app::ServeOptions {
                config,
                data,
                bind,
            })?
        }
        Command::Inspect { file, json, vars } => {
            let ds = Dataset::open(&file, &overrides(&vars)?)?;
            let doc = DatasetDoc::new(&file_name(&file), &ds);
            if json {
                serde_json::to_writer_pretty(&mut out, &doc)?;
                writeln!(out)?;
            } else {
                table::write_dataset(&mut out, &doc)?;
            }
        }
        Command::Profile { file, bbox, time, layer, format, vars, equator_band } => {
            let request = ProfileRequest {
                bbox: shearbox_core::BBox::parse(&bbox)?,
                time: shearbox_cf::TimeSelector::parse(&time)?,
                layer: layer.as_deref().map(parse_layer).transpose()?,
            };
            anyhow::ensure!(
                equator_band.is_finite() && (0.0..90.0).contains(&equator_band),
                "--equator-band must be a number of degrees from 0 to below 90, got {equator_band}"
            );
            let cfg = Config { equator_band_deg: equator_band, ..Config::default() };
            let ds = Dataset::open(&file, &overrides(&vars)?)?;
            let doc = query::profile(&file_name(&file), &ds, &request, &cfg)
                .with_context(|| format!("profile of {}", file.display()))?;
            match format {
                Format::Json => {
                    serde_json::to_writer_pretty(&mut out, &doc)?;
                    writeln!(out)?;
                }
                Format::Table => table::write_profile(&mut out, &doc)?,
            }
        }
    }
    Ok(())
}
