//! Outputs written under a temporary name and renamed into place when complete, and the
//! interrupt handling that goes with them.
//!
//! Nothing a user wrote is lost: a run writes `DIR/.NAME.tmp-PID` beside each target and
//! renames it over `DIR/NAME` only after the whole output is written and flushed. A run that
//! fails, panics or is interrupted (SIGINT, SIGTERM, SIGHUP) removes its temporary files and
//! leaves the targets as they were; one killed outright (SIGKILL, power loss) can leave a
//! `.NAME.tmp-PID` file, never a partial file under the target's name. An existing target is
//! replaced only when the caller allows it (`--force`).

use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicBool, Ordering};

use anyhow::{Context, Result, bail};

static INTERRUPTED: AtomicBool = AtomicBool::new(false);
static PENDING: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

fn pending() -> std::sync::MutexGuard<'static, Vec<PathBuf>> {
    PENDING.lock().unwrap_or_else(|p| p.into_inner())
}

/// Installs the handler of SIGINT, SIGTERM and SIGHUP: the first signal asks the run to
/// stop at the next time step ([`interrupted`]); a second one removes the temporary files
/// at once and exits with status 130.
pub fn install_interrupt_handler() -> Result<()> {
    fail_writes_past_the_size_limit();
    ctrlc::set_handler(|| {
        if INTERRUPTED.swap(true, Ordering::SeqCst) {
            for p in pending().iter() {
                let _ = std::fs::remove_file(p);
            }
            std::process::exit(130);
        }
    })
    .context("installing the interrupt handler")
}

/// Makes a write past the process's file-size limit (`ulimit -f`) fail with an error
/// ("File too large") instead of killing the process with SIGXFSZ, so that a run that hits
/// the limit removes its temporary files and says why, as it does when the disk is full.
#[cfg(target_os = "linux")]
#[allow(unsafe_code)]
pub fn fail_writes_past_the_size_limit() {
    unsafe extern "C" {
        fn signal(signum: std::ffi::c_int, handler: usize) -> usize;
    }
    const SIGXFSZ: std::ffi::c_int = 25;
    const SIG_IGN: usize = 1;
    // SAFETY: setting a signal's disposition to "ignore" installs no handler code and touches
    // no memory of ours; SIGXFSZ is 25 on every Linux architecture this builds for.
    unsafe {
        signal(SIGXFSZ, SIG_IGN);
    }
}

/// Elsewhere the default disposition stays.
#[cfg(not(target_os = "linux"))]
pub fn fail_writes_past_the_size_limit() {}

/// Whether an interrupt arrived.
pub fn interrupted() -> bool {
    INTERRUPTED.load(Ordering::SeqCst)
}

/// A set of outputs being written under temporary names.
#[derive(Debug)]
pub struct Staged {
    files: Vec<(PathBuf, PathBuf)>,
    committed: bool,
}

fn temp_name(target: &Path) -> PathBuf {
    let name = target.file_name().map(|n| n.to_string_lossy().into_owned()).unwrap_or_default();
    target.with_file_name(format!(".{name}.tmp-{}", std::process::id()))
}

impl Staged {
    /// Stages `targets`: refuses existing ones unless `force`, checks that their folders
    /// exist, and reserves a temporary name beside each.
    pub fn new(targets: &[PathBuf], force: bool) -> Result<Self> {
        let existing: Vec<String> =
            targets.iter().filter(|t| t.exists()).map(|t| t.display().to_string()).collect();
        if !existing.is_empty() && !force {
            bail!(
                "{} already exist(s); give --force to replace, or choose another output name",
                existing.join(", ")
            );
        }
        let mut files = Vec::new();
        for t in targets {
            if t.is_dir() {
                bail!("{} is a folder; give a file name for the output", t.display());
            }
            let dir = t.parent().filter(|d| !d.as_os_str().is_empty()).unwrap_or(Path::new("."));
            if !dir.is_dir() {
                bail!("the folder {} of output {} does not exist", dir.display(), t.display());
            }
            files.push((temp_name(t), t.clone()));
        }
        pending().extend(files.iter().map(|(tmp, _)| tmp.clone()));
        Ok(Self { files, committed: false })
    }

    /// The temporary name of target `i`.
    pub fn temp(&self, i: usize) -> &Path {
        &self.files[i].0
    }

    /// Renames every temporary file over its target.
    pub fn commit(mut self) -> Result<()> {
        for (tmp, target) in &self.files {
            if let Ok(f) = std::fs::File::open(tmp) {
                f.sync_all().with_context(|| format!("flushing {}", tmp.display()))?;
            }
            std::fs::rename(tmp, target)
                .with_context(|| format!("renaming {} to {}", tmp.display(), target.display()))?;
        }
        self.committed = true;
        Ok(())
    }
}

impl Drop for Staged {
    fn drop(&mut self) {
        let mut list = pending();
        for (tmp, _) in &self.files {
            if !self.committed {
                let _ = std::fs::remove_file(tmp);
            }
            list.retain(|p| p != tmp);
        }
    }
}
