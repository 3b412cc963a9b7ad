//! The datasets the service offers: open files, their state, and reloading.
//!
//! Each configured name has a slot holding the file being served as an `Arc<Loaded>`.
//! A request clones that `Arc` and works on it to the end, so a reload that swaps the slot
//! never disturbs a request in flight; the old file closes when its last request finishes.
//!
//! Reloading polls: every interval each slot's file (or the newest match of its glob) is
//! looked at — path, size, modification time, inode. A change must hold still for one more
//! interval before it is loaded, so a file being written is not opened half-way. The new file
//! is opened and validated on a blocking thread (its header: format, coordinates, variables,
//! times; and, for the classic formats, that the file is as long as its header says, while
//! HDF5 checks the same for netCDF-4), without reading any data, so that readiness does not
//! grow with the size of a step; only then is it swapped in. A file that fails
//! keeps the old one serving; the failure is logged and shown by `/readyz` until a good file
//! replaces it. Replace files by writing a new one and renaming it over the old (atomic), as
//! the fixture generator does. A file rewritten in place under its open handle is refused
//! (the library would validate it through the handle it already holds) and, until a good file
//! is renamed into place, box queries that need a read answer 503 instead of numbers from
//! changed bytes.

use std::collections::BTreeMap;
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::{Arc, RwLock};
use std::time::SystemTime;

use shearbox_cf::{Dataset, TimeSelector};

use crate::config::{DatasetSpec, ServeConfig};
use crate::wire::{DatasetDoc, DatasetStatusDoc};

/// What identifies one version of a file on disk.
#[derive(Debug, Clone, PartialEq, Eq, Hash)]
pub struct Fingerprint {
    /// The file.
    pub path: PathBuf,
    /// Its size, bytes.
    pub len: u64,
    /// Its modification time.
    pub modified: Option<SystemTime>,
    /// Its inode number (0 where the platform has none).
    pub inode: u64,
}

impl Fingerprint {
    /// The fingerprint of the file at `path` now.
    pub fn of(path: &Path) -> std::io::Result<Fingerprint> {
        let meta = std::fs::metadata(path)?;
        #[cfg(unix)]
        let inode = std::os::unix::fs::MetadataExt::ino(&meta);
        #[cfg(not(unix))]
        let inode = 0;
        Ok(Fingerprint {
            path: path.to_path_buf(),
            len: meta.len(),
            modified: meta.modified().ok(),
            inode,
        })
    }

    /// A short, stable hash of the fingerprint (FNV-1a, 64 bits), for entity tags that must
    /// stay the same across restarts for the same file.
    pub fn tag(&self) -> u64 {
        let mut h = Fnv::default();
        h.write(self.path.to_string_lossy().as_bytes());
        h.write(&self.len.to_le_bytes());
        let nanos = self
            .modified
            .and_then(|m| m.duration_since(SystemTime::UNIX_EPOCH).ok())
            .map_or(0, |d| d.as_nanos());
        h.write(&nanos.to_le_bytes());
        h.write(&self.inode.to_le_bytes());
        h.finish()
    }
}

/// FNV-1a, 64 bits (Fowler, Noll and Vo; parameters from the IETF draft
/// draft-eastlake-fnv): a small, fixed hash for entity tags.
#[derive(Debug, Clone, Copy)]
pub struct Fnv(u64);

impl Default for Fnv {
    fn default() -> Self {
        Fnv(0xcbf2_9ce4_8422_2325)
    }
}

impl Fnv {
    /// Hashes `bytes` in.
    pub fn write(&mut self, bytes: &[u8]) {
        for &b in bytes {
            self.0 ^= u64::from(b);
            self.0 = self.0.wrapping_mul(0x0000_0100_0000_01b3);
        }
    }

    /// The hash.
    pub fn finish(&self) -> u64 {
        self.0
    }
}

/// One loaded file of a dataset.
pub struct Loaded {
    /// The dataset's name.
    pub name: String,
    /// The open file.
    pub dataset: Dataset,
    /// Which version of which file.
    pub fingerprint: Fingerprint,
    /// A number no other load in this process has.
    pub generation: u64,
    /// When it was loaded.
    pub loaded_at: SystemTime,
    /// Its dataset document (named by the dataset's name).
    pub doc: DatasetDoc,
    /// Held while a whole time step is read for the cache, so that requests arriving together
    /// for a step not yet read wait for one read instead of each making their own.
    pub step_reads: std::sync::Mutex<()>,
}

impl Loaded {
    /// The file name, without its folder.
    pub fn file_name(&self) -> String {
        file_name(&self.fingerprint.path)
    }

    /// Whether the open file was rewritten in place since it was loaded: its path still
    /// names the same inode, whose size or modification time has changed. The open handle
    /// then reads the new bytes (the library reads zeros past a truncated end), so values
    /// read now cannot be trusted. A file deleted or renamed over keeps its old inode, which
    /// the handle still reads intact: that is no change here.
    pub fn changed_in_place(&self) -> bool {
        let Ok(now) = Fingerprint::of(&self.fingerprint.path) else { return false };
        now.inode == self.fingerprint.inode
            && (now.len != self.fingerprint.len || now.modified != self.fingerprint.modified)
    }
}

fn file_name(path: &Path) -> String {
    path.file_name().map_or_else(|| path.display().to_string(), |n| n.to_string_lossy().into())
}

/// A failed load.
#[derive(Debug, Clone)]
struct Failure {
    fingerprint: Option<Fingerprint>,
    message: String,
}

#[derive(Default)]
struct SlotState {
    current: Option<Arc<Loaded>>,
    failure: Option<Failure>,
    /// A change seen at the last poll, loaded if it holds still until the next.
    pending: Option<Fingerprint>,
}

struct Slot {
    spec: DatasetSpec,
    state: RwLock<SlotState>,
}

impl Slot {
    fn read(&self) -> std::sync::RwLockReadGuard<'_, SlotState> {
        self.state.read().unwrap_or_else(|p| p.into_inner())
    }

    fn write(&self) -> std::sync::RwLockWriteGuard<'_, SlotState> {
        self.state.write().unwrap_or_else(|p| p.into_inner())
    }
}

/// What a dataset name resolves to.
pub enum Lookup {
    /// No dataset of that name is configured.
    Unknown,
    /// Configured, but no file of it has loaded; the reason.
    Unavailable(String),
    /// The file being served.
    Ready(Arc<Loaded>),
}

/// What happened to one dataset at a poll.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PollOutcome {
    /// Nothing changed.
    Unchanged,
    /// A change was seen; it is loaded if it holds until the next poll.
    Settling,
    /// A new file was loaded and swapped in.
    Reloaded,
    /// A new file failed; the message says why.
    Failed(String),
}

/// Every configured dataset.
pub struct Catalog {
    slots: BTreeMap<String, Slot>,
    generations: AtomicU64,
}

impl Catalog {
    /// Opens every dataset of `config` (blocking: call it off the async threads). A dataset
    /// that fails is kept with its error and retried when its file changes.
    pub fn open(config: &ServeConfig) -> Catalog {
        let catalog = Catalog {
            slots: config
                .datasets
                .iter()
                .map(|(name, spec)| {
                    (
                        name.clone(),
                        Slot { spec: spec.clone(), state: RwLock::new(SlotState::default()) },
                    )
                })
                .collect(),
            generations: AtomicU64::new(0),
        };
        for (name, slot) in &catalog.slots {
            let outcome = match resolve(&slot.spec) {
                Ok(fp) => catalog.load_into(name, slot, fp),
                Err(message) => {
                    slot.write().failure =
                        Some(Failure { fingerprint: None, message: message.clone() });
                    PollOutcome::Failed(message)
                }
            };
            if let PollOutcome::Failed(message) = outcome {
                tracing::error!(dataset = %name, error = %message, "dataset failed to load");
            }
        }
        catalog
    }

    /// The dataset names, in order.
    pub fn names(&self) -> impl Iterator<Item = &str> {
        self.slots.keys().map(String::as_str)
    }

    /// Looks a dataset up by name.
    pub fn get(&self, name: &str) -> Lookup {
        let Some(slot) = self.slots.get(name) else { return Lookup::Unknown };
        let state = slot.read();
        match (&state.current, &state.failure) {
            (Some(loaded), _) => Lookup::Ready(Arc::clone(loaded)),
            (None, Some(f)) => Lookup::Unavailable(f.message.clone()),
            (None, None) => Lookup::Unavailable("not loaded yet".into()),
        }
    }

    /// The state of every dataset, for `/readyz`.
    pub fn status(&self) -> Vec<DatasetStatusDoc> {
        self.slots
            .iter()
            .map(|(name, slot)| {
                let state = slot.read();
                DatasetStatusDoc {
                    name: name.clone(),
                    serving: state.current.is_some(),
                    file: state.current.as_ref().map(|l| l.file_name()),
                    loaded_at: state.current.as_ref().map(|l| iso_utc(l.loaded_at)),
                    error: state.failure.as_ref().map(|f| f.message.clone()),
                }
            })
            .collect()
    }

    /// Looks at one dataset's file once; loads it when a change has held still since the last
    /// poll. Blocking.
    pub fn poll(&self, name: &str) -> PollOutcome {
        let Some(slot) = self.slots.get(name) else { return PollOutcome::Unchanged };
        let fp = match resolve(&slot.spec) {
            Ok(fp) => fp,
            Err(message) => {
                // The file went away: keep serving the open one, and say so.
                let mut state = slot.write();
                let known = state.failure.as_ref().is_some_and(|f| f.message == message);
                state.failure = Some(Failure { fingerprint: None, message: message.clone() });
                state.pending = None;
                return if known { PollOutcome::Unchanged } else { PollOutcome::Failed(message) };
            }
        };
        {
            let mut state = slot.write();
            let serving = state.current.as_ref().is_some_and(|l| l.fingerprint == fp);
            let failed =
                state.failure.as_ref().is_some_and(|f| f.fingerprint.as_ref() == Some(&fp));
            if serving || failed {
                if serving && state.failure.as_ref().is_some_and(|f| f.fingerprint.is_none()) {
                    state.failure = None; // the file is back
                }
                state.pending = None;
                return PollOutcome::Unchanged;
            }
            if state.pending.as_ref() != Some(&fp) {
                state.pending = Some(fp);
                return PollOutcome::Settling;
            }
            state.pending = None;
            // The served file itself, rewritten in place: the library would answer a second
            // open from the handle it holds, so the new bytes cannot be validated. Refuse it;
            // requests then get 503 for anything not cached (`Loaded::changed_in_place`).
            let rewritten = state
                .current
                .as_ref()
                .is_some_and(|l| l.fingerprint.path == fp.path && l.fingerprint.inode == fp.inode);
            if rewritten {
                let message = format!(
                    "{} was rewritten in place while served; its new contents are not loaded \
                     and reads of the old ones are refused: write new files aside and rename \
                     them over the old",
                    file_name(&fp.path)
                );
                state.failure = Some(Failure { fingerprint: Some(fp), message: message.clone() });
                return PollOutcome::Failed(message);
            }
        }
        self.load_into(name, slot, fp)
    }

    fn load_into(&self, name: &str, slot: &Slot, fp: Fingerprint) -> PollOutcome {
        match open_and_validate(name, &slot.spec, &fp) {
            Ok((dataset, doc)) => {
                let generation = self.generations.fetch_add(1, Ordering::Relaxed) + 1;
                let loaded = Arc::new(Loaded {
                    name: name.to_string(),
                    dataset,
                    fingerprint: fp,
                    generation,
                    loaded_at: SystemTime::now(),
                    doc,
                    step_reads: std::sync::Mutex::new(()),
                });
                let mut state = slot.write();
                state.current = Some(loaded);
                state.failure = None;
                PollOutcome::Reloaded
            }
            Err(message) => {
                slot.write().failure =
                    Some(Failure { fingerprint: Some(fp), message: message.clone() });
                PollOutcome::Failed(message)
            }
        }
    }
}

/// The file a dataset spec names now: the file itself, or the last match of its glob in name
/// order.
fn resolve(spec: &DatasetSpec) -> Result<Fingerprint, String> {
    let path = if spec.is_glob() {
        let pattern = spec.path.to_string_lossy();
        let matches = glob::glob(&pattern)
            .map_err(|e| format!("the glob {:?} is malformed: {e}", file_name(&spec.path)))?;
        let mut files: Vec<PathBuf> =
            matches.filter_map(Result::ok).filter(|p| p.is_file()).collect();
        files.sort();
        files
            .pop()
            .ok_or_else(|| format!("no file matches the glob {:?} (yet)", file_name(&spec.path)))?
    } else {
        spec.path.clone()
    };
    Fingerprint::of(&path).map_err(|e| format!("{}: cannot read the file: {e}", file_name(&path)))
}

/// Opens a file and checks its header (the reader's checks, truncation included) and that it
/// has a latest time step, reading no data. Error messages name the file without its folder.
fn open_and_validate(
    name: &str,
    spec: &DatasetSpec,
    fp: &Fingerprint,
) -> Result<(Dataset, DatasetDoc), String> {
    let short = |e: &dyn std::fmt::Display| {
        e.to_string().replace(&fp.path.display().to_string(), &file_name(&fp.path))
    };
    let overrides = spec.overrides()?;
    let ds = Dataset::open(&fp.path, &overrides).map_err(|e| short(&e))?;
    ds.time_index(&TimeSelector::Latest).map_err(|e| short(&e))?;
    let doc = DatasetDoc::new(name, &ds);
    Ok((ds, doc))
}

/// A time as ISO 8601 UTC, to the second.
pub fn iso_utc(t: SystemTime) -> String {
    let secs = t.duration_since(SystemTime::UNIX_EPOCH).map_or(0, |d| d.as_secs());
    let (days, rem) = (secs / 86_400, secs % 86_400);
    // Days since 1970-01-01 to a proleptic Gregorian date: H. Hinnant, "chrono-Compatible
    // Low-Level Date Algorithms", civil_from_days.
    let z = days as i64 + 719_468;
    let era = z.div_euclid(146_097);
    let doe = z - era * 146_097;
    let yoe = (doe - doe / 1460 + doe / 36_524 - doe / 146_096) / 365;
    let doy = doe - (365 * yoe + yoe / 4 - yoe / 100);
    let mp = (5 * doy + 2) / 153;
    let day = doy - (153 * mp + 2) / 5 + 1;
    let month = if mp < 10 { mp + 3 } else { mp - 9 };
    let year = yoe + era * 400 + i64::from(month <= 2);
    format!(
        "{year:04}-{month:02}-{day:02}T{:02}:{:02}:{:02}Z",
        rem / 3600,
        rem % 3600 / 60,
        rem % 60
    )
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn iso_utc_matches_known_instants() {
        // POSIX time values from `date -u -d @N` (GNU coreutils).
        let at = |s: u64| iso_utc(SystemTime::UNIX_EPOCH + std::time::Duration::from_secs(s));
        assert_eq!(at(0), "1970-01-01T00:00:00Z");
        assert_eq!(at(951_782_400), "2000-02-29T00:00:00Z");
        assert_eq!(at(1_798_761_599), "2026-12-31T23:59:59Z");
    }

    #[test]
    fn fnv_matches_the_reference_vectors() {
        // Test vectors of the FNV-1a 64-bit hash from draft-eastlake-fnv (section 8).
        let h = |s: &str| {
            let mut f = Fnv::default();
            f.write(s.as_bytes());
            f.finish()
        };
        assert_eq!(h(""), 0xcbf2_9ce4_8422_2325);
        assert_eq!(h("a"), 0xaf63_dc4c_8601_ec8c);
        assert_eq!(h("foobar"), 0x8594_4171_f739_67e8);
    }
}
