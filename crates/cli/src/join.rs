//! `shearbox join`: the parts of a sharded run (`shearbox compute --shard K/N`) put together
//! along time into one file, equal to what a single run would have written.
//!
//! The parts must share every definition (grid, layers, variables, attributes; only
//! `history` may differ) and their times must not overlap; they may be given in any order.
//! Region side files (CSV, JSON lines) are joined too when every part has them.

use std::io::{BufRead, Write};
use std::path::PathBuf;

use anyhow::{Context, Result, bail};
use clap::Args;
use shearbox_cf::write::{AttrValue, Header, OutputFile, PartFile};

use crate::compute::{WriteArgs, command_line, inputs, now_iso, side_paths};
use crate::staging::{self, Staged};
use crate::{Interrupted, file_name};

/// Options of `shearbox join`.
#[derive(Debug, Args)]
pub struct JoinArgs {
    /// Part files or quoted glob patterns ("out/part_*.nc"), in any order.
    #[arg(required = true, value_name = "PART")]
    pub parts: Vec<String>,
    /// The joined NetCDF-4 file to write.
    #[arg(short, long, value_name = "OUTPUT.nc")]
    pub output: PathBuf,
    /// How the output is written.
    #[command(flatten)]
    pub write: WriteArgs,
    /// Print nothing but errors.
    #[arg(long, short)]
    pub quiet: bool,
}

/// The header without `history`, for comparing parts.
fn comparable(h: &Header) -> Header {
    let mut h = h.clone();
    h.global_attrs.retain(|(n, _)| n != "history");
    h
}

/// Runs `shearbox join`.
pub fn run(args: JoinArgs) -> Result<()> {
    shearbox_cf::prepare_for_writing();
    let paths = inputs::expand(&args.parts)?;
    let mut parts = Vec::new();
    for p in &paths {
        parts.push(PartFile::open(p).with_context(|| format!("part {}", p.display()))?);
    }
    let first = comparable(parts[0].header());
    for p in &parts[1..] {
        if comparable(p.header()) != first {
            bail!(
                "{} and {} do not come from one run: their grids, layers, variables or attributes \
                 differ",
                parts[0].path().display(),
                p.path().display()
            );
        }
    }
    // Order by first time; empty parts (a shard with no steps) contribute nothing.
    parts.sort_by(|a, b| {
        let (x, y) = (a.times().first().copied(), b.times().first().copied());
        x.partial_cmp(&y).unwrap_or(std::cmp::Ordering::Equal)
    });
    let mut last: Option<(f64, String)> = None;
    for p in &parts {
        for t in p.times() {
            if let Some((prev, from)) = &last {
                if t <= prev {
                    bail!(
                        "the times of {} overlap those of {} (time value {t} after {prev}); join \
                         the parts of one run only, each once",
                        p.path().display(),
                        from
                    );
                }
            }
            last = Some((*t, p.path().display().to_string()));
        }
    }
    let with_sides: Vec<bool> =
        parts.iter().map(|p| side_paths(p.path()).iter().all(|s| s.exists())).collect();
    let sides = match (with_sides.iter().all(|b| *b), with_sides.iter().any(|b| *b)) {
        (true, _) => true,
        (false, false) => false,
        (false, true) => {
            let lacking: Vec<String> = parts
                .iter()
                .zip(&with_sides)
                .filter(|(_, s)| !**s)
                .map(|(p, _)| p.path().display().to_string())
                .collect();
            bail!("some parts have region files and these lack them: {}", lacking.join(", "));
        }
    };

    let mut targets = vec![args.output.clone()];
    if sides {
        targets.extend(side_paths(&args.output));
    }
    let staged = Staged::new(&targets, args.write.force)?;
    staging::install_interrupt_handler()?;

    let mut header = parts[0].header().clone();
    let earlier = match header.global("history") {
        Some(AttrValue::Text(t)) => format!("\n{t}"),
        _ => String::new(),
    };
    let history = format!(
        "{}: {} (shearbox {}){earlier}",
        now_iso(),
        command_line(),
        env!("CARGO_PKG_VERSION")
    );
    header.global_attrs.retain(|(n, _)| n != "history");
    let at = header.global_attrs.iter().position(|(n, _)| n == "source").map_or(0, |i| i + 1);
    header.global_attrs.insert(at, ("history".into(), AttrValue::Text(history)));
    header.deflate = args.write.deflate_level();
    let names: Vec<String> = header
        .vars
        .iter()
        .filter(|v| header.is_time_varying(v) && v.name != header.time_dim)
        .map(|v| v.name.clone())
        .collect();
    let mut out = OutputFile::create_with(staged.temp(0), header, args.write.writer.into())?;
    let mut steps = 0;
    for p in &parts {
        for (t, time) in p.times().iter().enumerate() {
            if staging::interrupted() {
                return Err(Interrupted.into());
            }
            let mut values = Vec::with_capacity(names.len());
            for n in &names {
                values.push((n.clone(), p.read_step(n, t)?));
            }
            out.write_step(*time, values)?;
            steps += 1;
        }
    }
    out.close()?;
    if sides {
        for (i, target) in side_paths(&args.output).iter().enumerate() {
            let mut w = std::io::BufWriter::new(
                std::fs::File::create(staged.temp(i + 1))
                    .with_context(|| format!("creating {}", target.display()))?,
            );
            let is_csv = i < 2;
            let mut header_line: Option<String> = None;
            for p in &parts {
                let src = &side_paths(p.path())[i];
                let reader = std::io::BufReader::new(
                    std::fs::File::open(src)
                        .with_context(|| format!("reading {}", src.display()))?,
                );
                for (n, line) in reader.lines().enumerate() {
                    let line = line.with_context(|| format!("reading {}", src.display()))?;
                    if is_csv && n == 0 {
                        match &header_line {
                            Some(h) if *h != line => {
                                bail!("{}: its columns differ from the first part's", src.display())
                            }
                            Some(_) => continue,
                            None => header_line = Some(line.clone()),
                        }
                    }
                    writeln!(w, "{line}")?;
                }
            }
            w.flush()?;
        }
    }
    staged.commit()?;
    if !args.quiet {
        eprintln!(
            "shearbox: joined {} part(s) into {} ({steps} time steps){}",
            parts.len(),
            file_name(&args.output),
            if sides { " with their region files" } else { "" }
        );
    }
    Ok(())
}
