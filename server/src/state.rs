//! The state shared by every request, and the gate that bounds blocking work.

use std::ops::Deref;
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Arc, OnceLock};
use std::time::Duration;

use axum::body::Bytes;
use tokio::sync::Semaphore;

use crate::cache::Cache;
use crate::catalog::{Catalog, Loaded, Lookup};
use crate::config::ServeConfig;
use crate::error::ApiError;
use crate::metrics::Metrics;

/// Everything a request may use. Cheap to clone (one `Arc`).
#[derive(Clone)]
pub struct AppState(Arc<Shared>);

/// The contents of [`AppState`].
pub struct Shared {
    /// The configuration the service started with.
    pub config: ServeConfig,
    /// The datasets.
    pub catalog: Catalog,
    /// Decoded inputs and finished answers.
    pub cache: Cache,
    /// Bounds on concurrent and waiting work.
    pub gate: WorkGate,
    /// Counters and histograms (shared with the connection tasks).
    pub metrics: Arc<Metrics>,
    /// The kernel's configuration.
    pub kernel: shearbox_core::Config,
    pub(crate) openapi: OnceLock<Bytes>,
}

impl Deref for AppState {
    type Target = Shared;
    fn deref(&self) -> &Shared {
        &self.0
    }
}

impl AppState {
    /// Opens every dataset of `config` and sets up the cache and limits. Blocking (it opens
    /// files): call it before starting the runtime or from a blocking thread.
    pub fn new(config: ServeConfig) -> AppState {
        let catalog = Catalog::open(&config);
        let cache_bytes =
            usize::try_from(config.cache_mb.saturating_mul(1 << 20)).unwrap_or(usize::MAX);
        let limits = &config.limits;
        let gate = WorkGate::new(limits.max_concurrent, limits.max_queue);
        let kernel = shearbox_core::Config {
            equator_band_deg: config.equator_band_deg,
            ..shearbox_core::Config::default()
        };
        AppState(Arc::new(Shared {
            catalog,
            cache: Cache::new(cache_bytes),
            gate,
            metrics: Arc::new(Metrics::default()),
            kernel,
            openapi: OnceLock::new(),
            config,
        }))
    }

    /// The file serving dataset `name`, or the error to answer.
    pub fn dataset(&self, name: &str) -> Result<Arc<Loaded>, ApiError> {
        match self.catalog.get(name) {
            Lookup::Ready(loaded) => Ok(loaded),
            Lookup::Unavailable(reason) => {
                Err(ApiError::Unavailable { dataset: name.to_string(), reason })
            }
            Lookup::Unknown => {
                let names: Vec<&str> = self.catalog.names().collect();
                Err(ApiError::NotFound {
                    code: "unknown_dataset",
                    message: format!(
                        "no dataset named {name:?}; datasets: {}",
                        if names.is_empty() { "(none)".into() } else { names.join(", ") }
                    ),
                })
            }
        }
    }
}

/// Admits at most `max_concurrent + max_queue` box queries at once and runs at most
/// `max_concurrent` of them, each on a blocking thread. A query past the queue is refused at
/// once (503), so memory stays bounded however many requests arrive.
#[derive(Clone)]
pub struct WorkGate(Arc<GateInner>);

struct GateInner {
    semaphore: Arc<Semaphore>,
    admitted: AtomicUsize,
    limit: usize,
}

/// A place in the gate: running or waiting. Freed when dropped.
pub struct Admission(Arc<GateInner>);

impl Drop for Admission {
    fn drop(&mut self) {
        self.0.admitted.fetch_sub(1, Ordering::AcqRel);
    }
}

impl WorkGate {
    /// A gate running `max_concurrent` at once with `max_queue` more waiting.
    pub fn new(max_concurrent: usize, max_queue: usize) -> Self {
        WorkGate(Arc::new(GateInner {
            semaphore: Arc::new(Semaphore::new(max_concurrent.max(1))),
            admitted: AtomicUsize::new(0),
            limit: max_concurrent.max(1) + max_queue,
        }))
    }

    /// Takes a place, or `None` when every place is taken.
    pub fn try_admit(&self) -> Option<Admission> {
        let before = self.0.admitted.fetch_add(1, Ordering::AcqRel);
        let admission = Admission(Arc::clone(&self.0));
        (before < self.0.limit).then_some(admission)
    }

    /// Queries running or waiting now.
    pub fn in_flight(&self) -> usize {
        self.0.admitted.load(Ordering::Acquire)
    }

    /// Runs `work` on a blocking thread once a slot is free, within `timeout` (waiting
    /// included). The place is held until `work` ends, even past the timeout, so the bound
    /// holds for work that cannot be interrupted.
    pub async fn run<T, F>(&self, timeout: Duration, work: F) -> Result<T, ApiError>
    where
        T: Send + 'static,
        F: FnOnce() -> T + Send + 'static,
    {
        let admission = self.try_admit().ok_or(ApiError::Overloaded)?;
        let semaphore = Arc::clone(&self.0.semaphore);
        let task = async move {
            let permit = semaphore
                .acquire_owned()
                .await
                .map_err(|_| ApiError::internal("the work gate was closed"))?;
            tokio::task::spawn_blocking(move || {
                let _held = (permit, admission);
                work()
            })
            .await
            .map_err(|e| ApiError::internal(format!("a box query failed: {e}")))
        };
        tokio::time::timeout(timeout, task).await.map_err(|_| ApiError::Timeout)?
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[tokio::test]
    async fn a_timed_out_query_keeps_its_place_until_its_work_ends() {
        let gate = WorkGate::new(1, 0);
        let (release, wait) = std::sync::mpsc::channel::<()>();
        let result = gate.run(Duration::from_millis(20), move || wait.recv().is_ok()).await;
        assert_eq!(result, Err(ApiError::Timeout));
        // The work still runs on its blocking thread and holds the only place.
        assert_eq!(gate.in_flight(), 1);
        assert_eq!(gate.run(Duration::from_secs(5), || ()).await, Err(ApiError::Overloaded));
        release.send(()).unwrap();
        for _ in 0..500 {
            if gate.in_flight() == 0 {
                break;
            }
            tokio::time::sleep(Duration::from_millis(10)).await;
        }
        assert_eq!(gate.in_flight(), 0);
        assert_eq!(gate.run(Duration::from_secs(5), || 7).await, Ok(7));
    }
}
