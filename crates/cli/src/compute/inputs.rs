//! The inputs of a batch run: file patterns expanded, files opened and checked against each
//! other, their time steps put in order, and the run's steps chosen (time range, shard).

use std::path::{Path, PathBuf};

use anyhow::{Context, Result, bail};
use shearbox_cf::calendar::{self, Calendar};
use shearbox_cf::output::DiagnosticsLayout;
use shearbox_cf::{Dataset, VarOverrides};
use shearbox_core::Layer;

/// One time step of one input file.
#[derive(Debug, Clone)]
pub struct Step {
    /// Index into [`Inputs::files`].
    pub file: usize,
    /// The step's index in its file.
    pub index: usize,
    /// The instant (microseconds since day 0 of the calendar).
    pub instant: i128,
    /// ISO 8601 UTC.
    pub iso: String,
}

/// The checked inputs and every time step in time order.
///
/// Only the first file stays open (its grid and layout describe them all); the pipeline
/// opens one file at a time while it reads, so a run over thousands of files holds neither
/// thousands of descriptors nor the library's buffers of each.
pub struct Inputs {
    /// The first usable file, open.
    pub first: Dataset,
    /// Usable files, in the order given (globs expanded and sorted).
    pub paths: Vec<PathBuf>,
    /// Files that could not be used, with the reason (only with `--skip-bad`).
    pub skipped: Vec<(PathBuf, String)>,
    /// The common calendar.
    pub calendar: Calendar,
    /// Every time step of every file, sorted by time.
    pub steps: Vec<Step>,
}

impl Inputs {
    /// The usable files in the order of their first time step (the order given does not
    /// matter to the output).
    pub fn files_in_time_order(&self) -> Vec<&Path> {
        let mut seen = vec![false; self.paths.len()];
        let mut out = Vec::new();
        for s in &self.steps {
            if !std::mem::replace(&mut seen[s.file], true) {
                out.push(self.paths[s.file].as_path());
            }
        }
        out
    }
}

/// Whether `text` holds a glob pattern character.
fn is_pattern(text: &str) -> bool {
    text.contains(['*', '?', '['])
}

/// Expands the arguments: a name that exists is taken as it is, a pattern is expanded
/// (sorted); a pattern that matches nothing, or a missing file, is an error.
pub fn expand(args: &[String]) -> Result<Vec<PathBuf>> {
    let mut out = Vec::new();
    for arg in args {
        let path = Path::new(arg);
        if path.exists() || !is_pattern(arg) {
            if !path.exists() {
                bail!("input {arg}: no such file; check the path");
            }
            out.push(path.to_path_buf());
            continue;
        }
        let mut matched: Vec<PathBuf> = glob::glob(arg)
            .with_context(|| format!("input pattern {arg:?} is not a valid glob pattern"))?
            .filter_map(Result::ok)
            .filter(|p| p.is_file())
            .collect();
        if matched.is_empty() {
            bail!("input pattern {arg:?} matches no file");
        }
        matched.sort();
        out.extend(matched);
    }
    let mut seen = std::collections::HashSet::new();
    for p in &out {
        let key = std::fs::canonicalize(p).unwrap_or_else(|_| p.clone());
        if !seen.insert(key) {
            bail!("input {} is given twice (directly or through a pattern)", p.display());
        }
    }
    Ok(out)
}

/// Why `ds` does not fit with `first` (grid, levels, variables, calendar), if it does not.
fn mismatch(first: &Dataset, ds: &Dataset, layers: &[Layer]) -> Option<String> {
    if first.grid().lat() != ds.grid().lat() || first.grid().lon() != ds.grid().lon() {
        return Some(format!(
            "its grid ({} × {}) differs from that of {} ({} × {})",
            ds.grid().n_lat(),
            ds.grid().n_lon(),
            first.path().display(),
            first.grid().n_lat(),
            first.grid().n_lon()
        ));
    }
    if first.levels().pa() != ds.levels().pa() {
        return Some(format!(
            "its levels {:?} hPa differ from those of {} ({:?} hPa)",
            ds.levels().all_hpa(),
            first.path().display(),
            first.levels().all_hpa()
        ));
    }
    if first.calendar() != ds.calendar() {
        return Some(format!(
            "its calendar ({}) differs from that of {} ({})",
            ds.calendar().cf_name(),
            first.path().display(),
            first.calendar().cf_name()
        ));
    }
    let (a, b) = (DiagnosticsLayout::new(first, layers), DiagnosticsLayout::new(ds, layers));
    if !a.same_as(&b) {
        return Some(format!(
            "it holds other variables than {} (diagnostics {:?} against {:?}) or another latitude order",
            first.path().display(),
            b.variable_names(),
            a.variable_names()
        ));
    }
    None
}

/// Opens every file, checks that they hold the same grid, levels, variables and calendar,
/// and orders their time steps. A file that fails is an error naming it, or with
/// `skip_bad` is left out and listed. Two steps at the same time are an error.
pub fn open(
    paths: &[PathBuf],
    overrides: &VarOverrides,
    layers_of: &dyn Fn(&Dataset) -> Result<Vec<Layer>>,
    skip_bad: bool,
) -> Result<(Inputs, Vec<Layer>)> {
    let mut first: Option<Dataset> = None;
    let mut usable: Vec<PathBuf> = Vec::new();
    let mut times: Vec<(Vec<i128>, Vec<String>)> = Vec::new();
    let mut skipped = Vec::new();
    let mut layers: Option<Vec<Layer>> = None;
    for path in paths {
        let checked = Dataset::open(path, overrides).map_err(anyhow::Error::from).and_then(|ds| {
            if ds.time_variable().is_none() {
                bail!(
                    "{}: no time coordinate was recognised; a batch run needs one (name it \
                         with --var time=NAME)",
                    path.display()
                );
            }
            let l = layers_of(&ds)?;
            if let Some(first) = &first {
                if let Some(why) = mismatch(first, &ds, &l) {
                    bail!("{}: cannot be combined with the other inputs: {why}", path.display());
                }
            }
            Ok((ds, l))
        });
        match checked {
            Ok((ds, l)) => {
                layers.get_or_insert(l);
                usable.push(path.clone());
                times.push((ds.time_instants().to_vec(), ds.times().to_vec()));
                if first.is_none() {
                    first = Some(ds);
                }
            }
            Err(e) if skip_bad => skipped.push((path.clone(), format!("{e:#}"))),
            Err(e) => {
                return Err(e.context(format!(
                    "input {} cannot be used (--skip-bad leaves such files out)",
                    path.display()
                )));
            }
        }
    }
    let (Some(layers), Some(first)) = (layers, first) else {
        bail!("none of the {} input file(s) could be used", paths.len());
    };
    let calendar = first.calendar();
    let mut steps: Vec<Step> = Vec::new();
    for (f, (instants, isos)) in times.iter().enumerate() {
        for (index, (instant, iso)) in instants.iter().zip(isos).enumerate() {
            steps.push(Step { file: f, index, instant: *instant, iso: iso.clone() });
        }
    }
    steps.sort_by_key(|s| s.instant);
    for pair in steps.windows(2) {
        if pair[0].instant == pair[1].instant {
            let (a, b) = (&usable[pair[0].file], &usable[pair[1].file]);
            bail!(
                "time {} appears twice: in {} (step {}) and in {} (step {}); give each time once",
                pair[0].iso,
                a.display(),
                pair[0].index,
                b.display(),
                pair[1].index
            );
        }
    }
    Ok((Inputs { first, paths: usable, skipped, calendar, steps }, layers))
}

/// A `--shard K/N` choice: the K-th (1-based) of N contiguous parts.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Shard {
    /// 1-based index.
    pub k: usize,
    /// Number of parts.
    pub n: usize,
}

impl Shard {
    /// Parses `K/N` with 1 ≤ K ≤ N.
    pub fn parse(text: &str) -> Result<Self> {
        let parsed = text.split_once('/').and_then(|(k, n)| {
            Some((k.trim().parse::<usize>().ok()?, n.trim().parse::<usize>().ok()?))
        });
        match parsed {
            Some((k, n)) if n >= 1 && (1..=n).contains(&k) => Ok(Shard { k, n }),
            Some((k, n)) => bail!(
                "--shard {text:?}: K must be from 1 to N (got K = {k}, N = {n}); with a job array \
                 of N tasks use --array=1-N and --shard ${{SLURM_ARRAY_TASK_ID}}/N"
            ),
            None => bail!("--shard {text:?}: expected K/N, for example 2/4"),
        }
    }

    /// The index range of this part among `total` steps: parts differ in length by at most
    /// one, and the N parts in order cover every step exactly once.
    pub fn range(&self, total: usize) -> std::ops::Range<usize> {
        let j = self.k - 1;
        (j * total / self.n)..((j + 1) * total / self.n)
    }
}

/// Parses a `--from`/`--to` bound into an instant of `calendar`.
pub fn bound(flag: &str, text: &str, calendar: Calendar) -> Result<i128> {
    let dt = calendar::parse_iso(text.trim())
        .map_err(|reason| anyhow::anyhow!("{flag} {text:?}: {reason}"))?;
    calendar::instant(&dt, calendar).ok_or_else(|| {
        anyhow::anyhow!(
            "{flag} {text:?}: that date does not exist in the {} calendar",
            calendar.cf_name()
        )
    })
}

/// The steps of the run: within `[from, to]` (inclusive), then this shard's part.
pub fn select(
    inputs: &Inputs,
    from: Option<&str>,
    to: Option<&str>,
    shard: Option<Shard>,
) -> Result<Vec<Step>> {
    let from_i = from.map(|t| bound("--from", t, inputs.calendar)).transpose()?;
    let to_i = to.map(|t| bound("--to", t, inputs.calendar)).transpose()?;
    if let (Some(a), Some(b)) = (from_i, to_i) {
        if a > b {
            bail!("--from {} is later than --to {}", from.unwrap_or(""), to.unwrap_or(""));
        }
    }
    let chosen: Vec<Step> = inputs
        .steps
        .iter()
        .filter(|s| from_i.is_none_or(|a| s.instant >= a) && to_i.is_none_or(|b| s.instant <= b))
        .cloned()
        .collect();
    if chosen.is_empty() {
        let (first, last) = match (inputs.steps.first(), inputs.steps.last()) {
            (Some(f), Some(l)) => (f.iso.as_str(), l.iso.as_str()),
            _ => ("(none)", "(none)"),
        };
        bail!(
            "no time step of the inputs lies between {} and {}; the inputs hold {} steps from {first} to {last}",
            from.unwrap_or("the first"),
            to.unwrap_or("the last"),
            inputs.steps.len()
        );
    }
    Ok(match shard {
        Some(s) => chosen[s.range(chosen.len())].to_vec(),
        None => chosen,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn shards_cover_every_step_once_in_order() {
        for total in [0usize, 1, 3, 8, 10, 37] {
            for n in 1..=6 {
                let mut next = 0;
                for k in 1..=n {
                    let r = Shard { k, n }.range(total);
                    assert_eq!(r.start, next, "total {total} n {n} k {k}");
                    assert!(r.len() <= total / n + 1);
                    next = r.end;
                }
                assert_eq!(next, total);
            }
        }
    }

    #[test]
    fn shard_syntax_errors_say_what_is_wrong() {
        assert_eq!(Shard::parse("2/4").unwrap(), Shard { k: 2, n: 4 });
        for (text, needle) in
            [("0/4", "from 1 to N"), ("5/4", "from 1 to N"), ("x", "K/N"), ("1/0", "from 1")]
        {
            let err = Shard::parse(text).unwrap_err().to_string();
            assert!(err.contains(needle), "{text}: {err}");
        }
    }
}
