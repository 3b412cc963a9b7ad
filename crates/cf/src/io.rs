//! The one thread that talks to the netCDF-C library.
//!
//! netCDF-C is not thread-safe, and the HDF5 library under it keeps per-thread state: it
//! prints its error stack ("HDF5-DIAG") on every thread except the one where netCDF-C turned
//! that printing off, and netCDF-C probes for optional attributes on every NetCDF-4 open. So
//! every library call of this crate runs on a single, lazily started worker thread: a call
//! sends a closure and waits for its result. The `netcdf` crate's global lock is still taken
//! by each call; the worker adds the guarantee that calls, including the multi-call read of
//! one block, never interleave with another dataset's, and that `nc_close` runs there too.
//!
//! A panic inside a job (the `netcdf` crate unwraps some library errors) is caught on the
//! worker and returned as an error message; the worker carries on. Should the thread fail
//! to start, jobs run on the calling thread under the same catch.

use std::cell::Cell;
use std::panic::{AssertUnwindSafe, catch_unwind};
use std::sync::mpsc::{self, Sender};
use std::sync::{Mutex, OnceLock};

type Job = Box<dyn FnOnce() + Send + 'static>;

thread_local! {
    /// Set on the netCDF thread, so that a job that itself calls [`run`] runs inline
    /// instead of waiting for itself.
    static ON_WORKER: Cell<bool> = const { Cell::new(false) };
}

/// Keeps the default panic report off the netCDF thread: a panic there (the `netcdf` crate
/// unwraps some library errors on damaged files) is caught and returned as an error that
/// names the file, so printing it too would only alarm. Panics elsewhere are reported as
/// before.
fn quiet_panics_on_the_worker() {
    let previous = std::panic::take_hook();
    std::panic::set_hook(Box::new(move |info| {
        if !ON_WORKER.with(Cell::get) {
            previous(info);
        }
    }));
}

fn worker() -> Option<&'static Mutex<Sender<Job>>> {
    static WORKER: OnceLock<Option<Mutex<Sender<Job>>>> = OnceLock::new();
    WORKER
        .get_or_init(|| {
            quiet_panics_on_the_worker();
            let (tx, rx) = mpsc::channel::<Job>();
            std::thread::Builder::new()
                .name("shearbox-netcdf".into())
                .spawn(move || {
                    ON_WORKER.with(|w| w.set(true));
                    while let Ok(job) = rx.recv() {
                        job();
                    }
                })
                .ok()
                .map(|_| Mutex::new(tx))
        })
        .as_ref()
}

fn panic_message(payload: Box<dyn std::any::Any + Send>) -> String {
    payload
        .downcast_ref::<String>()
        .cloned()
        .or_else(|| payload.downcast_ref::<&str>().map(|s| s.to_string()))
        .unwrap_or_else(|| "unknown failure".to_string())
}

/// Runs `f` on the netCDF thread and waits for it. `Err(message)` when `f` panicked.
pub(crate) fn run<T, F>(f: F) -> Result<T, String>
where
    T: Send + 'static,
    F: FnOnce() -> T + Send + 'static,
{
    let (tx, rx) = mpsc::sync_channel(1);
    let job: Job = Box::new(move || {
        let result = catch_unwind(AssertUnwindSafe(f)).map_err(panic_message);
        // The caller waits for this; if it has gone, there is nobody to tell.
        let _ = tx.send(result);
    });
    let on_worker = ON_WORKER.with(Cell::get);
    let sent = match worker() {
        Some(sender) if !on_worker => {
            let sender = sender.lock().unwrap_or_else(|p| p.into_inner());
            sender.send(job).map_err(|e| e.0)
        }
        _ => Err(job),
    };
    match sent {
        Ok(()) => rx.recv().unwrap_or_else(|_| Err("the netCDF thread stopped".to_string())),
        Err(job) => {
            job();
            rx.recv().unwrap_or_else(|_| Err("the job did not report".to_string()))
        }
    }
}

/// Hands a value to the netCDF thread to be dropped there (used for file handles, whose
/// drop closes the file in the library).
pub(crate) fn drop_there<T: Send + 'static>(value: T) {
    let _ = run(move || drop(value));
}

/// Prepares the library for a process that writes files: HDF5 is told not to close files at
/// exit (a file whose writes failed, on a full disk or past a size limit, would crash its exit
/// handler; every file is closed explicitly). Call it before any other library call.
pub fn prepare_for_writing() {
    let _ = run(crate::chunks::skip_exit_cleanup);
}

/// Sets the chunk cache that the netCDF library gives each variable of every file opened or
/// created after the call (process-wide). A streaming run that reads and writes each time
/// step whole gains nothing from a cache but the memory it holds (by default up to 16 MB per
/// variable and open file), so the batch pipeline turns it off with `bytes = 0`; chunks are
/// then decompressed on every read, which only costs time for inputs whose chunks span
/// several time steps.
pub fn set_chunk_cache(bytes: usize) -> Result<(), String> {
    let status = run(move || {
        let _lock = netcdf_sys::libnetcdf_lock.lock();
        chunk_cache_call(bytes)
    })?;
    if status == 0 { Ok(()) } else { Err(format!("nc_set_chunk_cache returned {status}")) }
}

#[allow(unsafe_code)]
fn chunk_cache_call(bytes: usize) -> i32 {
    // SAFETY: nc_set_chunk_cache stores three numbers in the library's defaults and touches no
    // memory of ours; it runs on the netCDF thread under the library's global lock, like
    // every other call.
    unsafe { netcdf_sys::nc_set_chunk_cache(bytes, 1009, 0.75) }
}
