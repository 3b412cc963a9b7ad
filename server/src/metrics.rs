//! Counters and a latency histogram, rendered in the Prometheus text exposition format
//! (version 0.0.4).
//!
//! The set of series is small and fixed (routes are the router's templates, not raw paths),
//! so plain maps under a mutex suffice and each service instance keeps its own, which keeps
//! tests independent of each other.

use std::collections::BTreeMap;
use std::fmt::Write;
use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering};
use std::time::Duration;

/// Upper bounds of the latency histogram's buckets, seconds.
pub const LATENCY_BUCKETS: [f64; 12] =
    [0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 10.0];

#[derive(Default, Clone)]
struct Histogram {
    counts: [u64; LATENCY_BUCKETS.len()],
    count: u64,
    sum: f64,
}

/// The service's metrics.
#[derive(Default)]
pub struct Metrics {
    requests: Mutex<BTreeMap<(String, u16), u64>>,
    latency: Mutex<BTreeMap<String, Histogram>>,
    /// Cache lookups that found a value.
    pub cache_hits: AtomicU64,
    /// Cache lookups that found nothing.
    pub cache_misses: AtomicU64,
    /// Bytes of decoded values read from dataset files.
    pub bytes_read: AtomicU64,
    /// Requests refused because the work queue was full.
    pub rejected: AtomicU64,
    /// Reloads that swapped in a new file.
    pub reloads: AtomicU64,
    /// Loads or reloads that failed.
    pub reload_failures: AtomicU64,
    /// Connections open now.
    pub connections_open: AtomicU64,
    /// Connections closed because the client sent its request or read the answer too slowly.
    pub connections_timed_out: AtomicU64,
}

fn escape(label: &str) -> String {
    label.replace('\\', "\\\\").replace('"', "\\\"").replace('\n', "\\n")
}

impl Metrics {
    /// Records one finished request.
    pub fn observe(&self, route: &str, status: u16, latency: Duration) {
        let mut requests = self.requests.lock().unwrap_or_else(|p| p.into_inner());
        *requests.entry((route.to_string(), status)).or_default() += 1;
        drop(requests);
        let secs = latency.as_secs_f64();
        let mut latency = self.latency.lock().unwrap_or_else(|p| p.into_inner());
        let h = latency.entry(route.to_string()).or_default();
        for (count, le) in h.counts.iter_mut().zip(LATENCY_BUCKETS) {
            if secs <= le {
                *count += 1;
            }
        }
        h.count += 1;
        h.sum += secs;
    }

    /// Adds `n` to a counter.
    pub fn add(counter: &AtomicU64, n: u64) {
        counter.fetch_add(n, Ordering::Relaxed);
    }

    /// The metrics in the Prometheus text format; `gauges` are added as they are.
    pub fn render(&self, gauges: &[(&str, &str, f64)]) -> String {
        let mut out = String::new();
        let _ =
            writeln!(out, "# HELP shearbox_http_requests_total HTTP requests by route and status.");
        let _ = writeln!(out, "# TYPE shearbox_http_requests_total counter");
        for ((route, status), n) in self.requests.lock().unwrap_or_else(|p| p.into_inner()).iter() {
            let _ = writeln!(
                out,
                "shearbox_http_requests_total{{route=\"{}\",status=\"{status}\"}} {n}",
                escape(route)
            );
        }
        let _ = writeln!(
            out,
            "# HELP shearbox_http_request_duration_seconds Time from request to response head."
        );
        let _ = writeln!(out, "# TYPE shearbox_http_request_duration_seconds histogram");
        for (route, h) in self.latency.lock().unwrap_or_else(|p| p.into_inner()).iter() {
            let route = escape(route);
            for (count, le) in h.counts.iter().zip(LATENCY_BUCKETS) {
                let _ = writeln!(
                    out,
                    "shearbox_http_request_duration_seconds_bucket{{route=\"{route}\",le=\"{le}\"}} {count}"
                );
            }
            let _ = writeln!(
                out,
                "shearbox_http_request_duration_seconds_bucket{{route=\"{route}\",le=\"+Inf\"}} {}",
                h.count
            );
            let _ = writeln!(
                out,
                "shearbox_http_request_duration_seconds_sum{{route=\"{route}\"}} {}",
                h.sum
            );
            let _ = writeln!(
                out,
                "shearbox_http_request_duration_seconds_count{{route=\"{route}\"}} {}",
                h.count
            );
        }
        let counters = [
            ("shearbox_cache_hits_total", "Cache lookups that found a value.", &self.cache_hits),
            (
                "shearbox_cache_misses_total",
                "Cache lookups that found nothing.",
                &self.cache_misses,
            ),
            (
                "shearbox_read_bytes_total",
                "Bytes of decoded values read from dataset files (box plus halo).",
                &self.bytes_read,
            ),
            (
                "shearbox_rejected_total",
                "Requests refused with 503 because the work queue was full.",
                &self.rejected,
            ),
            ("shearbox_reloads_total", "Dataset files loaded after a change.", &self.reloads),
            (
                "shearbox_reload_failures_total",
                "Dataset loads that failed (the previous file keeps serving).",
                &self.reload_failures,
            ),
            (
                "shearbox_connections_timed_out_total",
                "Connections closed because the client sent or read too slowly.",
                &self.connections_timed_out,
            ),
        ];
        for (name, help, counter) in counters {
            let _ = writeln!(out, "# HELP {name} {help}");
            let _ = writeln!(out, "# TYPE {name} counter");
            let _ = writeln!(out, "{name} {}", counter.load(Ordering::Relaxed));
        }
        let open = self.connections_open.load(Ordering::Relaxed) as f64;
        let open = ("shearbox_connections_open", "HTTP connections open now.", open);
        for (name, help, value) in gauges.iter().chain(std::iter::once(&open)) {
            let _ = writeln!(out, "# HELP {name} {help}");
            let _ = writeln!(out, "# TYPE {name} gauge");
            let _ = writeln!(out, "{name} {value}");
        }
        out
    }
}
