//! `shearbox plot`: the hodograph and the layer map of a pressure-level file, written as SVG
//! files into a folder, one pair per region and time step: the pictures of a nightly report.
//!
//! Each picture goes through the service's own steps (`query::plan`, `read_inputs`,
//! `diagnose`) and the same drawing code (`shearbox-render`), so a file's pictures are the
//! ones the service draws for the same box, time and layer. A region and step is read once
//! and computed twice: every adjacent layer for the hodograph, the one map layer for the map.
//!
//! File names are built only from the region's name (letters, digits, `_`, `-`, `.`), the
//! step's time in compact ISO 8601 basic form (`20260115T180000Z`; `step0` in a file without
//! a time coordinate) and the layer's levels: `REGION_TIME_hodograph.svg` and
//! `REGION_TIME_map_BOTTOM-TOPhPa.svg`. They are written under temporary names and renamed
//! once every picture of the run is drawn; an existing file is replaced only with `--force`.

use std::io::Write;
use std::path::PathBuf;

use anyhow::{Context, Result, bail};
use clap::Args;
use shearbox_cf::{Dataset, Role, TimeSelector};
use shearbox_core::{Config, Levels};
use shearbox_render::{Caption, LayerField, MapOptions, hodograph_svg, map_svg};
use shearbox_server::query::{self, Plan, ProfileRequest};

use crate::Interrupted;
use crate::args::parse_layer;
use crate::compute::regions::{self, Region};
use crate::staging::{self, Staged};
use crate::{file_name, overrides};

/// Options of `shearbox plot`.
#[derive(Debug, Args)]
#[command(group(clap::ArgGroup::new("boxes").required(true).multiple(true).args(["bbox", "regions"])))]
pub struct PlotArgs {
    /// The NetCDF file (pressure levels, as for `profile`).
    pub file: PathBuf,
    /// The folder to write the pictures into (made when missing).
    #[arg(short, long, value_name = "DIR")]
    pub out: PathBuf,
    /// One box W,S,E,N in degrees (GeoJSON order; W > E crosses the antimeridian), region
    /// name `box`.
    #[arg(long, value_name = "W,S,E,N", allow_hyphen_values = true)]
    pub bbox: Option<String>,
    /// Named boxes in FILE, one `NAME W,S,E,N` a line (the format of `compute --regions`).
    #[arg(long, value_name = "FILE")]
    pub regions: Option<PathBuf>,
    /// `latest`, `all`, an ISO 8601 time, or a step index (0 is the file's first step).
    #[arg(long, default_value = "latest")]
    pub time: String,
    /// The map's layer BOTTOM-TOP in hPa [default: 1000-500 where the file has both levels,
    /// else its lowest level to its level nearest 500 hPa].
    #[arg(long, value_name = "BOTTOM-TOP")]
    pub layer: Option<String>,
    /// An arrow every Nth row and column of the map [default: about 25 along the longer
    /// side].
    #[arg(long)]
    pub stride: Option<usize>,
    /// Thickness contour interval of the map, metres.
    #[arg(long, default_value_t = shearbox_render::DEFAULT_CONTOUR_INTERVAL_M)]
    pub contour_interval: f64,
    /// Use variable NAME for ROLE (see `inspect --help`).
    #[arg(long = "var", value_name = "ROLE=NAME")]
    pub vars: Vec<String>,
    /// Half-width of the equatorial band, degrees, where balance-based quantities are masked.
    #[arg(long, default_value_t = 5.0)]
    pub equator_band: f64,
    /// Replace existing picture files.
    #[arg(long)]
    pub force: bool,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
}

/// One region at one step: what to draw and where.
struct Job {
    region: Region,
    time_idx: usize,
    hodograph: PathBuf,
    map: PathBuf,
}

/// Runs `shearbox plot`.
pub fn run(args: PlotArgs) -> Result<()> {
    anyhow::ensure!(
        args.equator_band.is_finite() && (0.0..90.0).contains(&args.equator_band),
        "--equator-band must be a number of degrees from 0 to below 90, got {}",
        args.equator_band
    );
    anyhow::ensure!(
        args.contour_interval.is_finite() && args.contour_interval > 0.0,
        "--contour-interval must be a positive number of metres, got {}",
        args.contour_interval
    );
    if args.stride == Some(0) {
        bail!("--stride must be a whole number of at least 1 (an arrow every Nth cell)");
    }
    let regions = regions_of(&args)?;
    let ds = Dataset::open(&args.file, &overrides(&args.vars)?)?;
    let name = file_name(&args.file);
    if !ds.has(Role::Geopotential) {
        bail!(
            "{name} has no geopotential or geopotential height on pressure levels, so there is \
             no geostrophic wind to draw a hodograph from; if the file holds it under another \
             name, give --var geopotential=NAME (`shearbox inspect {name}` lists what was \
             recognised)"
        );
    }
    let layer = match &args.layer {
        Some(text) => parse_layer(text)?,
        None => default_layer(ds.levels(), args.quiet)?,
    };
    ds.levels().layer(layer.0, layer.1).with_context(|| format!("--layer of {name}"))?;
    regions::check(&regions, ds.grid()).with_context(|| format!("the boxes against {name}"))?;
    let steps = steps_of(&ds, &args.time)?;

    std::fs::create_dir_all(&args.out)
        .with_context(|| format!("making the output folder {}", args.out.display()))?;
    let layer_tag = format!("{}-{}hPa", number(layer.0), number(layer.1));
    let mut jobs = Vec::new();
    for &time_idx in &steps {
        let stamp = stamp(ds.times().get(time_idx).map(String::as_str), time_idx);
        for region in &regions {
            let base = format!("{}_{stamp}", region.name);
            jobs.push(Job {
                region: region.clone(),
                time_idx,
                hodograph: args.out.join(format!("{base}_hodograph.svg")),
                map: args.out.join(format!("{base}_map_{layer_tag}.svg")),
            });
        }
    }
    let targets: Vec<PathBuf> =
        jobs.iter().flat_map(|j| [j.hodograph.clone(), j.map.clone()]).collect();
    staging::install_interrupt_handler()?;
    let staged = Staged::new(&targets, args.force)?;

    let cfg = Config { equator_band_deg: args.equator_band, ..Config::default() };
    let options = MapOptions { stride: args.stride, contour_interval_m: args.contour_interval };
    for (k, job) in jobs.iter().enumerate() {
        if staging::interrupted() {
            return Err(Interrupted.into());
        }
        let (hodograph, map) = draw(&ds, &name, job, layer, &cfg, &options).with_context(|| {
            format!("region {} at step {} of {name}", job.region.name, job.time_idx)
        })?;
        for (i, text) in [(2 * k, hodograph), (2 * k + 1, map)] {
            let path = staged.temp(i);
            std::fs::write(path, text).with_context(|| format!("writing {}", path.display()))?;
        }
    }
    if staging::interrupted() {
        return Err(Interrupted.into());
    }
    staged.commit()?;
    if !args.quiet {
        let mut out = std::io::stdout().lock();
        for t in &targets {
            writeln!(out, "{}", t.display())?;
        }
    }
    Ok(())
}

/// The regions of `--bbox` (named `box`) and `--regions`.
fn regions_of(args: &PlotArgs) -> Result<Vec<Region>> {
    let mut out = Vec::new();
    if let Some(b) = &args.bbox {
        out.push(Region {
            name: "box".into(),
            bbox: shearbox_core::BBox::parse(b).context("--bbox")?,
        });
    }
    if let Some(path) = &args.regions {
        let text = std::fs::read_to_string(path)
            .with_context(|| format!("--regions {}: cannot read the file", path.display()))?;
        for r in regions::parse(&text, &path.display().to_string())? {
            if out.iter().any(|q: &Region| q.name == r.name) {
                bail!("--regions: the name {} is taken by --bbox", r.name);
            }
            out.push(r);
        }
    }
    Ok(out)
}

/// 1000–500 hPa where both levels exist, else the lowest level to the level nearest 500 hPa
/// above it.
fn default_layer(levels: &Levels, quiet: bool) -> Result<(f64, f64)> {
    let hpa = levels.all_hpa();
    if levels.layer(1000.0, 500.0).is_ok() {
        return Ok((1000.0, 500.0));
    }
    let bottom = hpa[0];
    let Some(top) =
        hpa[1..].iter().copied().min_by(|a, b| (a - 500.0).abs().total_cmp(&(b - 500.0).abs()))
    else {
        bail!("the file has one level ({bottom} hPa); a layer needs two");
    };
    if !quiet {
        eprintln!(
            "shearbox: the file lacks 1000 or 500 hPa; the map shows {}-{} hPa (choose with \
             --layer)",
            number(bottom),
            number(top)
        );
    }
    Ok((bottom, top))
}

/// The steps of `--time`, in file order.
fn steps_of(ds: &Dataset, text: &str) -> Result<Vec<usize>> {
    let n = ds.n_steps();
    if n == 0 {
        bail!("the file's time dimension holds no step");
    }
    let t = text.trim();
    if t.eq_ignore_ascii_case("all") {
        return Ok((0..n).collect());
    }
    if !t.is_empty() && t.chars().all(|c| c.is_ascii_digit()) {
        let idx: usize = t.parse().with_context(|| format!("--time {t}: not a step index"))?;
        if idx >= n {
            bail!("--time {t}: the file has {n} step(s), indices 0 to {}", n - 1);
        }
        return Ok(vec![idx]);
    }
    let selector = TimeSelector::parse(t).with_context(|| {
        format!("--time {t:?}: give latest, all, an ISO 8601 time or a step index")
    })?;
    Ok(vec![ds.time_index(&selector)?])
}

/// A time as `20260115T180000Z` (ISO 8601 basic format), or `stepN` without a time.
fn stamp(time: Option<&str>, idx: usize) -> String {
    match time {
        Some(t) if !t.is_empty() => t.chars().filter(|c| c.is_ascii_alphanumeric()).collect(),
        _ => format!("step{idx}"),
    }
}

/// A pressure for a file name: `1000`, `12.5`.
fn number(hpa: f64) -> String {
    let text = format!("{hpa:.3}");
    text.trim_end_matches('0').trim_end_matches('.').to_string()
}

/// The two pictures of one job, as SVG text.
fn draw(
    ds: &Dataset,
    name: &str,
    job: &Job,
    layer: (f64, f64),
    cfg: &Config,
    options: &MapOptions,
) -> Result<(String, String)> {
    let request =
        ProfileRequest { bbox: job.region.bbox, time: TimeSelector::Latest, layer: Some(layer) };
    // The step is chosen by index (a file may repeat a time); the rest of the plan is the
    // service's.
    let plan = Plan { time_idx: job.time_idx, ..query::plan(ds, &request)? };
    let fields = query::read_inputs(ds, &plan)?;
    let time_text = ds.times().get(job.time_idx).map_or("", String::as_str);
    let caption = Caption { dataset: name, time: time_text, caution: shearbox_server::CAUTION };

    let (_, deep) = query::diagnose(&request, &plan, &fields, cfg)?;
    let (rows, cols) = query::box_in_block(&plan);
    let field = LayerField::from_diagnostics(fields.grid(), fields.levels(), &deep.layers[0])?
        .select(rows, &cols)?;
    let map = map_svg(&field, &caption, options)?;

    let adjacent = Plan { layers: ds.levels().adjacent_layers(), ..plan };
    let request = ProfileRequest { layer: None, ..request };
    let (profile, _) = query::diagnose(&request, &adjacent, &fields, cfg)?;
    let hodograph = hodograph_svg(&profile, &caption)?;
    Ok((hodograph, map))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn names_are_compact_and_safe() {
        assert_eq!(stamp(Some("2026-01-15T18:00:00Z"), 3), "20260115T180000Z");
        assert_eq!(stamp(None, 0), "step0");
        assert_eq!(number(1000.0), "1000");
        assert_eq!(number(12.5), "12.5");
    }

    #[test]
    fn the_default_layer_is_1000_500_or_the_nearest() {
        let full = Levels::from_pa(vec![100_000.0, 85_000.0, 50_000.0, 30_000.0]).unwrap();
        assert_eq!(default_layer(&full, true).unwrap(), (1000.0, 500.0));
        let other = Levels::from_pa(vec![92_500.0, 70_000.0, 40_000.0, 20_000.0]).unwrap();
        assert_eq!(default_layer(&other, true).unwrap(), (925.0, 400.0));
    }
}
