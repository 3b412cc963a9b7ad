//! How the service asks the C library's allocator to hold memory.
//!
//! glibc's `malloc` gives threads their own arenas, up to eight per core by default, and an
//! arena keeps memory freed into it for later use. The service's threads take turns with large
//! short-lived buffers (whole time steps read for the cache, a request's kernel outputs), so
//! freed memory piles up in arenas no thread is using at the moment: under the soak test's
//! load the resident size settled about 60 MiB higher with the default than with two arenas
//! (measured: 307 MiB against 250 MiB, cache 64 MiB). Limiting the arenas to one per core is
//! common practice for long-running multi-threaded services on glibc. A `MALLOC_ARENA_MAX`
//! set in the environment is left to glibc, which reads it itself.

/// Limits glibc's malloc arenas to one per core (at least two), unless `MALLOC_ARENA_MAX` is
/// set. Call it before starting threads. Does nothing on other C libraries.
pub fn limit_malloc_arenas() {
    #[cfg(all(target_os = "linux", target_env = "gnu"))]
    {
        if std::env::var_os("MALLOC_ARENA_MAX").is_some() {
            return;
        }
        let cores = std::thread::available_parallelism().map_or(2, usize::from).max(2);
        let arenas = libc::c_int::try_from(cores).unwrap_or(libc::c_int::MAX);
        #[allow(unsafe_code)]
        // SAFETY: mallopt only sets a tuning parameter of the allocator; M_ARENA_MAX with a
        // positive value is a documented use, and it is called before the service's threads
        // start.
        unsafe {
            libc::mallopt(libc::M_ARENA_MAX, arenas);
        }
    }
}
