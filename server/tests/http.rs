//! End-to-end tests: the service bound to 127.0.0.1:0 and called with a real HTTP client.

mod common;

use std::path::Path;
use std::time::Duration;

use common::{Server, agent, config, fixtures};
use serde_json::Value;
use shearbox_cf::TimeSelector;
use shearbox_core::BBox;
use shearbox_server::config::ServeConfig;
use shearbox_server::query::{self, ProfileRequest};

struct Reply {
    status: u16,
    headers: Vec<(String, String)>,
    body: Vec<u8>,
}

impl Reply {
    fn header(&self, name: &str) -> Option<&str> {
        self.headers.iter().find(|(k, _)| k.eq_ignore_ascii_case(name)).map(|(_, v)| v.as_str())
    }

    fn json(&self) -> Value {
        serde_json::from_slice(&self.body)
            .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&self.body)))
    }
}

fn fetch(agent: &ureq::Agent, url: &str, headers: &[(&str, &str)]) -> Reply {
    let mut request = agent.get(url);
    for (k, v) in headers {
        request = request.header(*k, *v);
    }
    let mut response = request.call().unwrap_or_else(|e| panic!("{url}: {e}"));
    let status = response.status().as_u16();
    let headers = response
        .headers()
        .iter()
        .map(|(k, v)| (k.to_string(), v.to_str().unwrap_or("").to_string()))
        .collect();
    let body = response.body_mut().read_to_vec().expect("a body");
    Reply { status, headers, body }
}

/// Polls `url` until `done` holds, at most `tries` times 50 ms apart; returns the last reply.
fn poll_until(
    agent: &ureq::Agent,
    url: &str,
    tries: usize,
    done: impl Fn(&Reply) -> bool,
) -> Reply {
    let mut last = fetch(agent, url, &[]);
    for _ in 0..tries {
        if done(&last) {
            break;
        }
        std::thread::sleep(Duration::from_millis(50));
        last = fetch(agent, url, &[]);
    }
    last
}

/// The value of an unlabelled metric, or of the series whose labels are exactly `labels`.
fn metric(text: &str, name: &str, labels: &str) -> f64 {
    let series = if labels.is_empty() { name.to_string() } else { format!("{name}{{{labels}}}") };
    text.lines()
        .find_map(|l| l.strip_prefix(&series).and_then(|rest| rest.strip_prefix(' ')))
        .unwrap_or_else(|| panic!("no series {series} in\n{text}"))
        .trim()
        .parse()
        .unwrap()
}

#[test]
fn every_endpoint_and_every_bad_request_over_http() {
    let mut server = Server::start(config(""));
    let agent = agent();
    let url = |path: &str| format!("{}{path}", server.base());

    assert_eq!(fetch(&agent, &url("/healthz"), &[]).json()["status"], "ok");
    let ready = fetch(&agent, &url("/readyz"), &[]);
    assert_eq!(ready.status, 200);
    assert_eq!(ready.json()["ready"], true);
    let list = fetch(&agent, &url("/v1/datasets"), &[]).json();
    assert_eq!(list["datasets"].as_array().unwrap().len(), 3);
    let doc = fetch(&agent, &url("/v1/datasets/global"), &[]);
    assert_eq!(doc.status, 200);
    assert_eq!(doc.json()["grid"]["periodic"], true);

    let profile_url = url("/v1/datasets/tidy/profile?bbox=-10,40,10,55&time=2026-01-14T06:00:00Z");
    let profile = fetch(&agent, &profile_url, &[]);
    assert_eq!(profile.status, 200);
    assert_eq!(profile.json()["time"], "2026-01-14T06:00:00Z");
    assert_eq!(profile.json()["layers"].as_array().unwrap().len(), 8);

    // gzip on the wire, and the same document once inflated.
    let zipped = fetch(&agent, &profile_url, &[("Accept-Encoding", "gzip")]);
    assert_eq!(zipped.header("content-encoding"), Some("gzip"));
    let mut inflated = Vec::new();
    std::io::Read::read_to_end(&mut flate2::read::GzDecoder::new(&zipped.body[..]), &mut inflated)
        .unwrap();
    assert_eq!(inflated, profile.body);

    // Revalidation.
    let tag = profile.header("etag").expect("an ETag").to_string();
    let not_modified = fetch(&agent, &profile_url, &[("If-None-Match", &tag)]);
    assert_eq!(not_modified.status, 304);
    assert!(not_modified.body.is_empty());

    let layer = fetch(
        &agent,
        &url("/v1/datasets/tidy/layer?bottom=1000&top=500&bbox=-10,40,10,55&grid=true&stride=2"),
        &[],
    );
    assert_eq!(layer.status, 200);
    assert_eq!(layer.json()["layers"].as_array().unwrap().len(), 1);
    assert_eq!(layer.json()["grid"]["stride"], 2);

    let api = fetch(&agent, &url("/openapi.json"), &[]);
    assert_eq!(api.json()["openapi"], "3.1.0");

    for (uri, status, code, words) in common::bad_requests() {
        let reply = fetch(&agent, &url(&uri), &[]);
        assert_eq!(reply.status, status, "{uri}: {}", String::from_utf8_lossy(&reply.body));
        let body = reply.json();
        assert_eq!(body["error"]["code"], code, "{uri}");
        let message = body["error"]["message"].as_str().unwrap();
        assert!(words.iter().all(|w| message.contains(w)), "{uri}: {message}");
    }

    let metrics = fetch(&agent, &url("/metrics"), &[]);
    assert_eq!(metrics.status, 200);
    assert!(metrics.header("content-type").unwrap().starts_with("text/plain"));
    let text = String::from_utf8(metrics.body).unwrap();
    let route = "route=\"/v1/datasets/{name}/profile\"";
    // Two 200s (plain, then gzip from the cache) and one 304; the bad requests are 400s.
    assert_eq!(
        metric(&text, "shearbox_http_requests_total", &format!("{route},status=\"200\"")),
        2.0
    );
    assert_eq!(
        metric(&text, "shearbox_http_requests_total", &format!("{route},status=\"304\"")),
        1.0
    );
    let count = metric(&text, "shearbox_http_request_duration_seconds_count", route);
    let inf = metric(
        &text,
        "shearbox_http_request_duration_seconds_bucket",
        &format!("{route},le=\"+Inf\""),
    );
    assert_eq!(count, inf);
    assert!(count >= 3.0);
    assert!(metric(&text, "shearbox_read_bytes_total", "") > 0.0);
    // The gzip request was answered from the cache.
    assert!(metric(&text, "shearbox_cache_hits_total", "") >= 1.0);
    assert!(metric(&text, "shearbox_cache_misses_total", "") >= 2.0);

    server.stop().expect("a clean shutdown");
    assert!(
        std::net::TcpStream::connect(server.addr.as_str()).is_err(),
        "the port is closed after shutdown"
    );
}

fn replace(dir: &Path, name: &str, content: &[u8]) {
    // Write aside, then rename over: the way nightly files should arrive.
    let tmp = dir.join(format!(".{name}.part"));
    std::fs::write(&tmp, content).unwrap();
    std::fs::rename(&tmp, dir.join(name)).unwrap();
}

#[test]
fn replaced_and_new_files_are_reloaded_and_a_broken_one_keeps_the_old() {
    let dir = tempfile::tempdir().unwrap();
    let tidy = std::fs::read(fixtures().join("tidy_nc4.nc")).unwrap();
    let leap = std::fs::read(fixtures().join("short_names_allleap.nc")).unwrap();
    replace(dir.path(), "current.nc", &tidy);
    replace(dir.path(), "run_20260114.nc", &tidy);
    let text =
        "reload_interval_secs = 0.05\n[datasets]\nfile = \"current.nc\"\nseries = \"run_*.nc\"\n";
    let server = Server::start(ServeConfig::from_toml(text, dir.path()).unwrap());
    let agent = agent();
    let url = |path: &str| format!("{}{path}", server.base());
    let last_time = |r: &Reply| r.json()["times"]["last"].as_str().unwrap_or("").to_string();

    let before = fetch(&agent, &url("/v1/datasets/file"), &[]);
    assert_eq!(last_time(&before), "2026-01-14T12:00:00Z");
    let old_tag = before.header("etag").unwrap().to_string();
    let old = server.state.dataset("file").unwrap();

    // A replaced file: the all_leap fixture ends on 2025-02-29T06:00:00Z.
    replace(dir.path(), "current.nc", &leap);
    let after = poll_until(&agent, &url("/v1/datasets/file"), 400, |r| {
        last_time(r) == "2025-02-29T06:00:00Z"
    });
    assert_eq!(last_time(&after), "2025-02-29T06:00:00Z", "the new file was not loaded");
    assert_ne!(after.header("etag").unwrap(), old_tag);
    let profile = fetch(&agent, &url("/v1/datasets/file/profile?bbox=-10,40,10,55"), &[]);
    assert_eq!(profile.status, 200);
    assert_eq!(profile.json()["time"], "2025-02-29T06:00:00Z");

    // A request that started on the old file finishes on it: its handle still reads.
    let request = ProfileRequest {
        bbox: BBox::parse("-10,40,10,55").unwrap(),
        time: TimeSelector::Latest,
        layer: None,
    };
    let on_old = query::profile("file", &old.dataset, &request, &server.state.kernel).unwrap();
    assert_eq!(on_old.time, "2026-01-14T12:00:00Z");
    drop(old);

    // A broken file: the previous one keeps serving, and /readyz says why.
    replace(dir.path(), "current.nc", &tidy[..tidy.len() / 3]);
    let ready =
        poll_until(&agent, &url("/readyz"), 400, |r| !r.json()["datasets"][0]["error"].is_null());
    let status = &ready.json()["datasets"][0];
    assert_eq!(status["name"], "file");
    assert!(!status["error"].is_null(), "the broken file was not noticed: {status}");
    assert_eq!(status["serving"], true);
    assert_eq!(status["file"], "current.nc");
    let still = fetch(&agent, &url("/v1/datasets/file"), &[]);
    assert_eq!(still.status, 200);
    assert_eq!(last_time(&still), "2025-02-29T06:00:00Z");

    // A newer file matching the glob is served once it appears.
    assert_eq!(last_time(&fetch(&agent, &url("/v1/datasets/series"), &[])), "2026-01-14T12:00:00Z");
    replace(dir.path(), "run_20260115.nc", &leap);
    let newer = poll_until(&agent, &url("/v1/datasets/series"), 400, |r| {
        last_time(r) == "2025-02-29T06:00:00Z"
    });
    assert_eq!(last_time(&newer), "2025-02-29T06:00:00Z", "the newer file was not loaded");
    let ready = fetch(&agent, &url("/readyz"), &[]).json();
    assert_eq!(ready["datasets"][1]["file"], "run_20260115.nc");

    let metrics = String::from_utf8(fetch(&agent, &url("/metrics"), &[]).body).unwrap();
    assert!(metric(&metrics, "shearbox_reloads_total", "") >= 2.0);
    assert!(metric(&metrics, "shearbox_reload_failures_total", "") >= 1.0);
}

#[test]
fn under_load_every_answer_is_a_result_or_a_503_and_the_service_stays_up() {
    let server = Server::start(config("cache_mb = 0\n[limits]\nmax_concurrent = 1\nmax_queue = 2"));
    let base = server.base();
    // 16 threads x 4 requests, each a different box, so that none is answered from the cache.
    let threads: Vec<_> = (0..16)
        .map(|t| {
            let base = base.clone();
            std::thread::spawn(move || {
                let agent = agent();
                (0..4)
                    .map(|k| {
                        let west = -40 + t + 16 * (k % 2);
                        let url = format!(
                            "{base}/v1/datasets/tidy/profile?bbox={west},30,{},60&time=2026-01-14T0{}:00Z",
                            west + 10,
                            6 * (k / 2)
                        );
                        fetch(&agent, &url, &[])
                    })
                    .collect::<Vec<_>>()
            })
        })
        .collect();
    let replies: Vec<Reply> = threads.into_iter().flat_map(|t| t.join().unwrap()).collect();
    assert_eq!(replies.len(), 64);
    for r in &replies {
        match r.status {
            200 => assert!(r.json()["layers"].is_array()),
            503 => {
                assert_eq!(r.json()["error"]["code"], "overloaded");
                assert_eq!(r.header("retry-after"), Some("1"));
            }
            other => panic!("status {other}: {}", String::from_utf8_lossy(&r.body)),
        }
    }
    let agent = agent();
    let after = fetch(&agent, &format!("{base}/v1/datasets/tidy/profile?bbox=0,40,10,50"), &[]);
    assert_eq!(after.status, 200);
    let refused = replies.iter().filter(|r| r.status == 503).count() as f64;
    let metrics = String::from_utf8(fetch(&agent, &format!("{base}/metrics"), &[]).body).unwrap();
    assert_eq!(metric(&metrics, "shearbox_rejected_total", ""), refused);
    assert_eq!(metric(&metrics, "shearbox_work_in_flight", ""), 0.0);
}
