//! `shearbox compute`: every diagnostic of every selected time step of many input files,
//! streamed one step at a time into one CF NetCDF-4 file, with optional per-region box-mean
//! profiles beside it.
//!
//! The run is a three-stage pipeline joined by rendezvous channels: a reader thread reads
//! step t+1 (through the reader's one netCDF thread) while the kernel computes step t on
//! all cores and a writer thread appends step t−1 to the output. A rendezvous channel holds
//! nothing, so at any moment at most two steps of input (one being read, one being
//! computed) and two of output (one being built, one being written) are in memory, whatever
//! the number of steps: memory is bounded by the size of one step, not of the run.

pub mod inputs;
mod progress;
pub mod regions;

use std::path::{Path, PathBuf};
use std::sync::mpsc::sync_channel;
use std::time::Instant;

use anyhow::{Context, Result, bail};
use clap::Args;
use shearbox_cf::output::{DiagnosticsLayout, Provenance};
use shearbox_cf::write::{OutputFile, Writer};
use shearbox_cf::{CfError, Dataset, VarOverrides};
use shearbox_core::{
    Config, Diagnostics, Fields, Layer, MaskCounts, MaskReason, Parallelism, box_profile,
    compute_into,
};
use shearbox_server::wire::ProfileDoc;

use self::inputs::{Shard, Step};
use self::progress::Progress;
use self::regions::{Region, SideWriters};
use crate::staging::{self, Staged};
use crate::{Interrupted, file_name, overrides};

/// Options of `shearbox compute`.
#[derive(Debug, Args)]
pub struct ComputeArgs {
    /// Input files or quoted glob patterns ("data/era_*.nc"): consecutive times of one grid.
    #[arg(required = true, value_name = "INPUT")]
    pub inputs: Vec<String>,
    /// The NetCDF-4 file to write.
    #[arg(short, long, value_name = "OUTPUT.nc")]
    pub output: PathBuf,
    /// `adjacent` (every pair of neighbouring levels) or deep layers in hPa,
    /// BOTTOM-TOP[,BOTTOM-TOP...], for example 1000-500,850-300.
    #[arg(long, default_value = "adjacent")]
    pub layers: String,
    /// First time to compute (ISO 8601, inclusive).
    #[arg(long, value_name = "ISO8601")]
    pub from: Option<String>,
    /// Last time to compute (ISO 8601, inclusive).
    #[arg(long, value_name = "ISO8601")]
    pub to: Option<String>,
    /// Threads for the computation (default: all cores).
    #[arg(long)]
    pub threads: Option<usize>,
    /// Compute only the K-th of N contiguous parts of the selected times (1 ≤ K ≤ N), for
    /// the tasks of a job array; `shearbox join` puts the parts together.
    #[arg(long, value_name = "K/N")]
    pub shard: Option<String>,
    /// Also write the box-mean profile of this box W,S,E,N (region name `box`).
    #[arg(long = "box", value_name = "W,S,E,N", allow_hyphen_values = true)]
    pub bbox: Option<String>,
    /// Also write box-mean profiles of the named boxes in FILE (lines `NAME W,S,E,N`).
    #[arg(long, value_name = "FILE")]
    pub regions: Option<PathBuf>,
    /// Use variable NAME for ROLE (see `inspect --help`).
    #[arg(long = "var", value_name = "ROLE=NAME")]
    pub vars: Vec<String>,
    /// Half-width of the equatorial band, degrees, where balance-based quantities are masked.
    #[arg(long, default_value_t = 5.0)]
    pub equator_band: f64,
    /// How the output is written.
    #[command(flatten)]
    pub write: WriteArgs,
    /// Leave out input files (or time steps) that cannot be read, and list them at the end,
    /// instead of stopping.
    #[arg(long)]
    pub skip_bad: bool,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
}

/// How an output file is written (shared by `compute` and `join`).
#[derive(Debug, Clone, Copy, Args)]
pub struct WriteArgs {
    /// Deflate level of the gridded variables, 0 (none) to 9.
    #[arg(long, default_value_t = 1, value_parser = clap::value_parser!(i32).range(0..=9))]
    pub deflate: i32,
    /// How compressed chunks reach the file: `direct` (compressed on all cores, appended
    /// through HDF5) or `library` (the netCDF library compresses them on one thread).
    #[arg(long, value_enum, default_value_t = WriterArg::Direct)]
    pub writer: WriterArg,
    /// Replace existing output files.
    #[arg(long)]
    pub force: bool,
}

impl WriteArgs {
    /// The deflate level for the file header (`None` for 0).
    pub fn deflate_level(&self) -> Option<i32> {
        (self.deflate > 0).then_some(self.deflate)
    }
}

/// The writer of `--writer`.
#[derive(Debug, Clone, Copy, PartialEq, Eq, clap::ValueEnum)]
pub enum WriterArg {
    /// Chunks compressed on all cores and appended through HDF5.
    Direct,
    /// Chunks compressed by the netCDF library on one thread.
    Library,
}

impl From<WriterArg> for Writer {
    fn from(w: WriterArg) -> Self {
        match w {
            WriterArg::Direct => Writer::Direct,
            WriterArg::Library => Writer::Library,
        }
    }
}

/// The side files of an output `DIR/NAME.nc`: `DIR/NAME.layers.csv`, `DIR/NAME.levels.csv`,
/// `DIR/NAME.profiles.jsonl`.
pub fn side_paths(output: &Path) -> [PathBuf; 3] {
    let name = output.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    let stem = name.strip_suffix(".nc").unwrap_or(&name).to_string();
    ["layers.csv", "levels.csv", "profiles.jsonl"]
        .map(|ext| output.with_file_name(format!("{stem}.{ext}")))
}

/// The current time as ISO 8601 UTC, for `history`.
pub fn now_iso() -> String {
    let secs = std::time::SystemTime::now()
        .duration_since(std::time::UNIX_EPOCH)
        .map_or(0, |d| d.as_secs() as i64);
    shearbox_cf::calendar::from_unix_seconds(secs).to_iso()
}

/// The command line as typed (for `history`).
pub fn command_line() -> String {
    std::env::args().collect::<Vec<_>>().join(" ")
}

/// Peak resident memory of this process, MiB (Linux), if known.
pub fn peak_rss_mib() -> Option<f64> {
    let status = std::fs::read_to_string("/proc/self/status").ok()?;
    let line = status.lines().find(|l| l.starts_with("VmHWM:"))?;
    let kib: f64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib / 1024.0)
}

fn layers_for(spec: &str, ds: &Dataset) -> Result<Vec<Layer>> {
    let levels = ds.levels();
    if spec.trim().eq_ignore_ascii_case("adjacent") {
        let layers = levels.adjacent_layers();
        if layers.is_empty() {
            bail!("{}: one pressure level only; a layer needs two", ds.path().display());
        }
        return Ok(layers);
    }
    let mut out: Vec<Layer> = Vec::new();
    for part in spec.split(',') {
        let (b, t) = crate::args::parse_layer(part).map_err(|e| {
            anyhow::anyhow!("--layers: {e}; give `adjacent` or a list such as 1000-500,850-300")
        })?;
        let layer = levels
            .layer(b, t)
            .with_context(|| format!("{}: --layers {part}", ds.path().display()))?;
        if out.contains(&layer) {
            bail!("--layers: {part} is given twice");
        }
        out.push(layer);
    }
    Ok(out)
}

/// One step on its way from the kernel to the writer.
struct StepOutput {
    time_value: f64,
    values: Vec<(String, Vec<f32>)>,
    profiles: Vec<(String, ProfileDoc)>,
}

/// Totals for the summary.
#[derive(Debug, Default)]
struct Totals {
    steps: usize,
    counts: MaskCounts,
    bytes_in: usize,
    skipped_steps: Vec<(String, String)>,
}

/// Runs `shearbox compute`.
pub fn run(args: ComputeArgs) -> Result<()> {
    let started = Instant::now();
    anyhow::ensure!(
        args.equator_band.is_finite() && (0.0..90.0).contains(&args.equator_band),
        "--equator-band must be a number of degrees from 0 to below 90, got {}",
        args.equator_band
    );
    if let Some(n) = args.threads {
        anyhow::ensure!(n >= 1, "--threads must be at least 1");
        rayon::ThreadPoolBuilder::new()
            .num_threads(n)
            .build_global()
            .context("setting up the thread pool")?;
    }
    let shard = args.shard.as_deref().map(Shard::parse).transpose()?;
    let mut regions: Vec<Region> = Vec::new();
    if let Some(b) = &args.bbox {
        regions.push(Region {
            name: "box".into(),
            bbox: shearbox_core::BBox::parse(b).context("--box")?,
        });
    }
    if let Some(path) = &args.regions {
        let text = std::fs::read_to_string(path)
            .with_context(|| format!("--regions {}: cannot read the file", path.display()))?;
        for r in regions::parse(&text, &path.display().to_string())? {
            if regions.iter().any(|q| q.name == r.name) {
                bail!("--regions: the name {} is taken by --box", r.name);
            }
            regions.push(r);
        }
    }

    shearbox_cf::prepare_for_writing();
    let paths = inputs::expand(&args.inputs)?;
    let overrides: VarOverrides = overrides(&args.vars)?;
    let layer_spec = args.layers.clone();
    let (inputs, layers) = inputs::open(
        &paths,
        &overrides,
        &|ds: &Dataset| layers_for(&layer_spec, ds),
        args.skip_bad,
    )?;
    let plan = inputs::select(&inputs, args.from.as_deref(), args.to.as_deref(), shard)?;
    let first = &inputs.first;
    regions::check(&regions, first.grid())?;

    let mut targets = vec![args.output.clone()];
    if !regions.is_empty() {
        targets.extend(side_paths(&args.output));
    }
    let staged = Staged::new(&targets, args.write.force)?;
    staging::install_interrupt_handler()?;

    let cfg = Config { equator_band_deg: args.equator_band, ..Config::default() };
    let layout = DiagnosticsLayout::new(first, &layers);
    let prov = Provenance {
        history: format!(
            "{}: {} (shearbox {})",
            now_iso(),
            command_line(),
            env!("CARGO_PKG_VERSION")
        ),
        source: format!(
            "shearbox {} diagnostics from {}",
            env!("CARGO_PKG_VERSION"),
            inputs
                .files_in_time_order()
                .iter()
                .map(|p| file_name(p))
                .collect::<Vec<_>>()
                .join(", ")
        ),
        comment: shearbox_server::CAUTION.to_string(),
        config: cfg,
        deflate: args.write.deflate_level(),
    };
    // Every step is read and written whole: the library's chunk caches would only hold
    // memory (see shearbox_cf::set_chunk_cache).
    shearbox_cf::set_chunk_cache(0)
        .map_err(|e| anyhow::anyhow!("setting up the netCDF library: {e}"))?;
    let output = match OutputFile::create_with(
        staged.temp(0),
        layout.header(&prov),
        args.write.writer.into(),
    ) {
        Err(e) if args.write.writer == WriterArg::Direct => {
            // The library path always works; say why the fast one did not.
            if !args.quiet {
                eprintln!(
                    "shearbox: direct chunk writing is not available ({e}); using the netCDF library's writer"
                );
            }
            OutputFile::create_with(staged.temp(0), layout.header(&prov), Writer::Library)?
        }
        other => other?,
    };
    let sides = if regions.is_empty() {
        None
    } else {
        Some(SideWriters::create(staged.temp(1), staged.temp(2), staged.temp(3))?)
    };

    let mut progress = Progress::new(plan.len(), args.quiet);
    match shard {
        Some(s) => progress.say(&format!(
            "shard {}/{}: {} of the selected time steps, {} to {}",
            s.k,
            s.n,
            plan.len(),
            plan.first().map_or("-", |p| p.iso.as_str()),
            plan.last().map_or("-", |p| p.iso.as_str())
        )),
        None => progress.say(&format!(
            "{} time steps from {} file(s), {} layers on {} × {} cells",
            plan.len(),
            inputs.paths.len(),
            layers.len(),
            first.grid().n_lat(),
            first.grid().n_lon()
        )),
    }
    let source = Source { paths: &inputs.paths, overrides: &overrides };
    let totals = pipeline(
        &source,
        &plan,
        &layers,
        &cfg,
        &layout,
        &regions,
        output,
        sides,
        &mut progress,
        args.skip_bad,
    )
    .map_err(|e| {
        if e.is::<Interrupted>() {
            e
        } else {
            e.context(format!(
                "writing {} failed; nothing was written under that name",
                args.output.display()
            ))
        }
    })?;
    staged.commit()?;
    progress.finish();

    if !progress.is_quiet() {
        let wall = started.elapsed().as_secs_f64();
        let n_var = layout.variable_names().len();
        let c = &totals.counts;
        let pct = |n: usize| 100.0 * n as f64 / c.total().max(1) as f64;
        progress.say(&format!(
            "wrote {} ({} time steps × {} layers on {} cells, {n_var} variables){}",
            args.output.display(),
            totals.steps,
            layout.n_layers(),
            layout.n_cells(),
            if regions.is_empty() {
                String::new()
            } else {
                format!(" and the profiles of {} region(s) beside it", regions.len())
            }
        ));
        progress.say(&format!(
            "layer cells {}: thermal wind defined at {} ({:.1} %); masked: equatorial band {}, pole rows {}, missing input {}, below ground {}",
            c.total(), c.valid, pct(c.valid), c.equator, c.pole, c.missing, c.below_ground
        ));
        for (name, why) in layout.left_out() {
            progress.say(&format!("left out {name}: {why}"));
        }
        for (path, why) in &inputs.skipped {
            progress.say(&format!("skipped file {}: {why}", path.display()));
        }
        for (time, why) in &totals.skipped_steps {
            progress.say(&format!("skipped time step {time}: {why}"));
        }
        progress.say(&format!(
            "wall {:.2} s; {:.2} steps/s; {:.1} MB/s of decoded input ({:.1} MB); peak memory {}",
            wall,
            totals.steps as f64 / wall,
            totals.bytes_in as f64 / 1e6 / wall,
            totals.bytes_in as f64 / 1e6,
            peak_rss_mib().map_or_else(|| "unknown".to_string(), |m| format!("{m:.0} MiB"))
        ));
    }
    Ok(())
}

/// Where the pipeline reads: the input files, opened one at a time.
struct Source<'a> {
    paths: &'a [PathBuf],
    overrides: &'a VarOverrides,
}

impl Source<'_> {
    /// Reads `step`, reusing `open` when it is the step's file, else opening that file.
    fn read(&self, step: &Step, open: &mut Option<(usize, Dataset)>) -> Result<Fields, CfError> {
        if open.as_ref().is_none_or(|(f, _)| *f != step.file) {
            *open = None;
            *open = Some((step.file, Dataset::open(&self.paths[step.file], self.overrides)?));
        }
        let Some((_, ds)) = open.as_ref() else { unreachable!("opened above") };
        if ds.time_instants().get(step.index) != Some(&step.instant) {
            return Err(CfError::Damaged {
                file: ds.path().to_path_buf(),
                reason: format!("the file changed during the run (time step {} moved)", step.iso),
            });
        }
        ds.read_fields(step.index, None)
    }
}

#[allow(clippy::too_many_arguments)]
fn pipeline(
    source: &Source<'_>,
    plan: &[Step],
    layers: &[Layer],
    cfg: &Config,
    layout: &DiagnosticsLayout,
    regions: &[Region],
    mut output: OutputFile,
    mut sides: Option<SideWriters>,
    progress: &mut Progress,
    skip_bad: bool,
) -> Result<Totals> {
    let (in_tx, in_rx) = sync_channel::<(Step, Result<Fields, CfError>)>(0);
    let (out_tx, out_rx) = sync_channel::<StepOutput>(0);
    // The writer hands each step's value buffers back for the next step to fill.
    let (spare_tx, spare_rx) = sync_channel::<Vec<(String, Vec<f32>)>>(1);
    let mut totals = Totals::default();
    std::thread::scope(|scope| -> Result<()> {
        scope.spawn(move || {
            let mut open = None;
            for step in plan {
                if staging::interrupted() {
                    break;
                }
                let read = source.read(step, &mut open);
                if in_tx.send((step.clone(), read)).is_err() {
                    break;
                }
            }
        });
        let writer = scope.spawn(move || -> Result<()> {
            for step in out_rx {
                let spare = output.write_step_returning(step.time_value, step.values)?;
                // Nobody may want it any more (the last step): then it is dropped here.
                let _ = spare_tx.try_send(spare);
                if let Some(s) = sides.as_mut() {
                    for (name, doc) in &step.profiles {
                        s.append(name, doc)?;
                    }
                }
            }
            output.close()?;
            if let Some(s) = sides {
                s.finish()?;
            }
            Ok(())
        });
        let computed = (|| -> Result<()> {
            let mut diag = Diagnostics::default();
            for (step, read) in in_rx {
                if staging::interrupted() {
                    return Err(Interrupted.into());
                }
                let fields = match read {
                    Ok(f) => f,
                    Err(e) if skip_bad => {
                        progress.say(&format!("skipping time step {}: {e}", step.iso));
                        totals.skipped_steps.push((step.iso.clone(), e.to_string()));
                        continue;
                    }
                    Err(e) => {
                        return Err(anyhow::Error::from(e).context(format!(
                            "reading time step {} (--skip-bad leaves such steps out)",
                            step.iso
                        )));
                    }
                };
                totals.bytes_in += fields.n_values() * std::mem::size_of::<f32>();
                // One set of output arrays for the whole run: no fresh pages to fault in per step.
                compute_into(&mut diag, &fields, layers, cfg, Parallelism::Rayon);
                for l in &diag.layers {
                    for &code in &l.mask {
                        totals.counts.add(MaskReason::from_u8(code));
                    }
                }
                let name = file_name(&source.paths[step.file]);
                let mut profiles = Vec::with_capacity(regions.len());
                for r in regions {
                    let p = box_profile(&fields, &diag, &r.bbox)
                        .with_context(|| format!("region {}", r.name))?;
                    profiles.push((r.name.clone(), ProfileDoc::new(&name, &step.iso, &r.bbox, &p)));
                }
                drop(fields);
                let mut values = spare_rx.try_recv().unwrap_or_default();
                layout.step_values_into(&diag, &mut values);
                let out =
                    StepOutput { time_value: layout.time_value(step.instant), values, profiles };
                if out_tx.send(out).is_err() {
                    // The writer stopped: its error says why.
                    break;
                }
                totals.steps += 1;
                progress.step(&step.iso);
            }
            if staging::interrupted() {
                return Err(Interrupted.into());
            }
            Ok(())
        })();
        drop(out_tx);
        let written = writer.join().map_err(|_| anyhow::anyhow!("the writer thread failed"))?;
        // A writer error is the cause when both failed.
        written?;
        computed
    })?;
    Ok(totals)
}
