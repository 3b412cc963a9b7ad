//! The service under faults and hostile clients, over real sockets on 127.0.0.1: dataset files
//! deleted, truncated or replaced by garbage while it serves; clients that send a byte at a
//! time or never read; requests that try to name a path; oversized URIs and headers; tokens
//! and the log; CORS off by default; the warning for an address other machines can reach.
//!
//! The log is captured for the whole test binary (one global subscriber); each test looks
//! only at lines that name its own dataset or address.

mod common;

use std::io::{Read, Write};
use std::net::TcpStream;
use std::path::Path;
use std::sync::{Arc, Mutex, OnceLock};
use std::time::{Duration, Instant};

use common::{Server, Sink, config, fixtures};
use serde_json::Value;
use shearbox_cf::{Dataset, TimeSelector, VarOverrides};
use shearbox_core::{BBox, Config};
use shearbox_server::app::exposure_warning;
use shearbox_server::config::ServeConfig;
use shearbox_server::query::{self, ProfileRequest};

/// Every line the service logged in this test binary.
fn log() -> &'static Arc<Mutex<Vec<u8>>> {
    static LOG: OnceLock<Arc<Mutex<Vec<u8>>>> = OnceLock::new();
    LOG.get_or_init(|| {
        let buffer = Arc::new(Mutex::new(Vec::new()));
        let sink = Arc::clone(&buffer);
        let subscriber = tracing_subscriber::fmt()
            .with_ansi(false)
            .with_max_level(tracing::Level::INFO)
            .with_writer(move || Sink(Arc::clone(&sink)))
            .finish();
        tracing::subscriber::set_global_default(subscriber).expect("one global subscriber");
        buffer
    })
}

/// The captured lines that contain `marker`.
fn log_lines(marker: &str) -> Vec<String> {
    let text = String::from_utf8_lossy(&log().lock().unwrap()).to_string();
    text.lines().filter(|l| l.contains(marker)).map(str::to_string).collect()
}

/// The service on a socket of its own, its log captured from the start.
fn serve(config: ServeConfig) -> Server {
    log();
    Server::start(config)
}

/// [`serve`] on `bind`.
fn serve_on(config: ServeConfig, bind: &str) -> Server {
    log();
    Server::start_on(config, bind)
}

/// An answer read off a raw socket.
struct Raw {
    status: u16,
    head: String,
    body: Vec<u8>,
}

impl Raw {
    fn json(&self) -> Value {
        serde_json::from_slice(&self.body)
            .unwrap_or_else(|e| panic!("{e}: {}", String::from_utf8_lossy(&self.body)))
    }

    fn header(&self, name: &str) -> Option<String> {
        self.head.lines().find_map(|l| {
            let (k, v) = l.split_once(':')?;
            k.trim().eq_ignore_ascii_case(name).then(|| v.trim().to_string())
        })
    }
}

/// Sends `request` bytes as they are (no client normalises the path) and reads the answer to
/// the end of the connection.
fn raw(addr: &str, request: &[u8]) -> Raw {
    let mut s = TcpStream::connect(addr).unwrap();
    s.set_read_timeout(Some(Duration::from_secs(60))).unwrap();
    s.write_all(request).unwrap();
    let mut bytes = Vec::new();
    s.read_to_end(&mut bytes).unwrap();
    let split = bytes.windows(4).position(|w| w == b"\r\n\r\n").expect("a complete head");
    let head = String::from_utf8_lossy(&bytes[..split]).to_string();
    let status = head.split_whitespace().nth(1).and_then(|s| s.parse().ok()).expect("a status");
    Raw { status, head, body: bytes[split + 4..].to_vec() }
}

/// A GET of `target` (sent as written) with extra header lines.
fn get(addr: &str, target: &str, headers: &str) -> Raw {
    let request =
        format!("GET {target} HTTP/1.1\r\nHost: test\r\n{headers}Connection: close\r\n\r\n");
    raw(addr, request.as_bytes())
}

/// Polls `target` until `done` holds, at most `tries` times 50 ms apart.
fn poll_until(addr: &str, target: &str, tries: usize, done: impl Fn(&Raw) -> bool) -> Raw {
    let mut last = get(addr, target, "");
    for _ in 0..tries {
        if done(&last) {
            break;
        }
        std::thread::sleep(Duration::from_millis(50));
        last = get(addr, target, "");
    }
    last
}

/// The value of an unlabelled metric.
fn metric(addr: &str, name: &str) -> f64 {
    let text = String::from_utf8(get(addr, "/metrics", "").body).unwrap();
    text.lines()
        .find_map(|l| l.strip_prefix(name).and_then(|r| r.strip_prefix(' ')))
        .unwrap_or_else(|| panic!("no {name} in\n{text}"))
        .trim()
        .parse()
        .unwrap()
}

/// The profile document `query::profile` (the command line's path) makes of `file`, as text.
fn direct(name: &str, file: &Path, bbox: &str) -> Vec<u8> {
    let ds = Dataset::open(file, &VarOverrides::default()).unwrap();
    let request = ProfileRequest {
        bbox: BBox::parse(bbox).unwrap(),
        time: TimeSelector::Latest,
        layer: None,
    };
    serde_json::to_vec(&query::profile(name, &ds, &request, &Config::default()).unwrap()).unwrap()
}

/// Writes `content` aside and renames it over `name`, as new files should arrive.
fn replace(dir: &Path, name: &str, content: &[u8]) {
    let tmp = dir.join(format!(".{name}.part"));
    std::fs::write(&tmp, content).unwrap();
    std::fs::rename(&tmp, dir.join(name)).unwrap();
}

/// Deterministic bytes that are no file format (a linear congruential generator, Knuth's MMIX
/// constants).
fn garbage(len: usize) -> Vec<u8> {
    let mut x: u64 = 0x2545_f491_4f6c_dd1d;
    (0..len)
        .map(|_| {
            x = x.wrapping_mul(6_364_136_223_846_793_005).wrapping_add(1_442_695_040_888_963_407);
            (x >> 56) as u8
        })
        .collect()
}

/// The `/readyz` entry of dataset `name`.
fn readiness(addr: &str, name: &str) -> Value {
    let doc = get(addr, "/readyz", "").json();
    doc["datasets"].as_array().unwrap().iter().find(|d| d["name"] == name).cloned().unwrap()
}

#[test]
fn a_deleted_garbage_or_truncated_file_keeps_the_old_data_serving() {
    let dir = tempfile::tempdir().unwrap();
    let original = std::fs::read(fixtures().join("tidy_nc4.nc")).unwrap();
    replace(dir.path(), "current.nc", &original);
    let text = "reload_interval_secs = 0.05\n[datasets]\nfaulty = \"current.nc\"\n";
    let server = serve(ServeConfig::from_toml(text, dir.path()).unwrap());
    let addr = server.addr.as_str();
    let want = |bbox: &str| direct("faulty", &fixtures().join("tidy_nc4.nc"), bbox);
    let profile = |bbox: &str| get(addr, &format!("/v1/datasets/faulty/profile?bbox={bbox}"), "");

    let first = profile("-10,40,10,55");
    assert_eq!(first.status, 200);
    assert_eq!(first.body, want("-10,40,10,55"));

    // Each fault, then a box no request has asked for (so it is read from the file the
    // service holds open) and the readiness entry and log line that say what happened.
    type Fault<'a> = (&'a str, Box<dyn Fn() + 'a>, &'a str, &'a str);
    let faults: [Fault; 3] = [
        (
            "deleted",
            Box::new(|| std::fs::remove_file(dir.path().join("current.nc")).unwrap()),
            "-20,35,0,50",
            "cannot read the file",
        ),
        (
            "garbage",
            Box::new(|| replace(dir.path(), "current.nc", &garbage(original.len()))),
            "0,30,20,45",
            "current.nc",
        ),
        (
            "truncated",
            Box::new(|| replace(dir.path(), "current.nc", &original[..original.len() / 2])),
            "-15,45,5,60",
            "current.nc",
        ),
    ];
    let mut failures_seen = 0;
    for (what, fault, bbox, words) in faults {
        let errors_before = log_lines("dataset=faulty").len();
        let error_before = readiness(addr, "faulty")["error"].clone();
        fault();
        let ready = poll_until(addr, "/readyz", 400, |r| {
            let d = &r.json()["datasets"][0];
            !d["error"].is_null() && d["error"] != error_before
        });
        let status = &ready.json()["datasets"][0];
        assert!(!status["error"].is_null(), "{what}: not noticed: {status}");
        let error = status["error"].as_str().unwrap();
        assert!(error.contains(words), "{what}: {error}");
        assert!(!error.contains(dir.path().to_str().unwrap()), "{what}: {error}");
        assert_eq!(status["serving"], true, "{what}");
        assert_eq!(ready.status, 200, "{what}: the old file serves, so the service is ready");
        let answer = profile(bbox);
        assert_eq!(answer.status, 200, "{what}: {}", String::from_utf8_lossy(&answer.body));
        assert_eq!(answer.body, want(bbox), "{what}: not the old data");
        assert_eq!(profile("-10,40,10,55").body, first.body, "{what}");
        let lines = log_lines("dataset=faulty");
        assert!(
            lines[errors_before..].iter().any(|l| l.contains("ERROR")
                && l.contains("dataset reload failed; the previous file keeps serving")
                && l.contains(words)),
            "{what}: {lines:#?}"
        );
        failures_seen += 1;
    }
    assert_eq!(failures_seen, 3);
    assert!(metric(addr, "shearbox_reload_failures_total") >= 3.0);

    // A good file again: served, and the error is gone.
    let leap = std::fs::read(fixtures().join("short_names_allleap.nc")).unwrap();
    replace(dir.path(), "current.nc", &leap);
    let ready = poll_until(addr, "/readyz", 400, |r| r.json()["datasets"][0]["error"].is_null());
    assert!(ready.json()["datasets"][0]["error"].is_null(), "{}", ready.json());
    assert_eq!(profile("-10,40,10,55").json()["time"], "2025-02-29T06:00:00Z");
    assert!(log_lines("dataset=faulty").iter().any(|l| l.contains("dataset reloaded")));
}

#[test]
fn a_file_truncated_in_place_answers_503_never_a_500_and_says_why() {
    // Rewriting the served file in place (rather than renaming a new one over it) changes
    // the bytes under the open handle (the library reads zeros past the new end): what was
    // cached keeps serving (answers, and time steps read whole), every read is refused with
    // 503 rather than answered with numbers from damaged bytes, and the next good file is
    // served.
    let dir = tempfile::tempdir().unwrap();
    let original = std::fs::read(fixtures().join("tidy_nc4.nc")).unwrap();
    replace(dir.path(), "inplace.nc", &original);
    let text = "reload_interval_secs = 0.05\n[datasets]\ninplace = \"inplace.nc\"\n";
    let server = serve(ServeConfig::from_toml(text, dir.path()).unwrap());
    let addr = server.addr.as_str();
    let url = |bbox: &str| format!("/v1/datasets/inplace/profile?bbox={bbox}");
    let cached = get(addr, &url("-10,40,10,55"), "");
    assert_eq!(cached.status, 200);

    let file = std::fs::OpenOptions::new().write(true).open(dir.path().join("inplace.nc")).unwrap();
    file.set_len(original.len() as u64 / 4).unwrap();
    drop(file);

    // Boxes across the grid at the two earlier times, none asked before: each is a read
    // from the file, refused.
    let mut statuses = Vec::new();
    for (k, time) in ["2026-01-14T00:00Z", "2026-01-14T06:00Z"].iter().enumerate() {
        for west in [-40, -20, 0, 20] {
            let a = get(
                addr,
                &format!(
                    "{}&time={time}",
                    url(&format!("{},{},{},{}", west - k as i32, 25, west + 15, 65))
                ),
                "",
            );
            assert_eq!(a.status, 503, "{}", String::from_utf8_lossy(&a.body));
            {
                assert_eq!(a.json()["error"]["code"], "dataset_unavailable");
                let message = a.json()["error"]["message"].as_str().unwrap().to_string();
                assert!(message.contains("inplace.nc"), "{message}");
                assert!(!message.contains(dir.path().to_str().unwrap()), "{message}");
                assert_eq!(a.header("retry-after").as_deref(), Some("1"));
            }
            statuses.push(a.status);
        }
    }
    assert_eq!(statuses.len(), 8);
    // The latest step is small beside the cache, so the first request read it whole before
    // the rewrite: new boxes of it are cut from those values, the file's as it was.
    for west in [-40, -20, 0, 20] {
        let bbox = format!("{west},25,{},65", west + 15);
        let a = get(addr, &url(&bbox), "");
        assert_eq!(a.status, 200, "{}", String::from_utf8_lossy(&a.body));
        assert_eq!(a.body, direct("inplace", &fixtures().join("tidy_nc4.nc"), &bbox), "{bbox}");
    }
    assert_eq!(get(addr, &url("-10,40,10,55"), "").body, cached.body, "the cached answer serves");
    let ready = poll_until(addr, "/readyz", 400, |r| !r.json()["datasets"][0]["error"].is_null());
    let error = ready.json()["datasets"][0]["error"].as_str().unwrap_or("").to_string();
    assert!(error.contains("inplace.nc was rewritten in place"), "{}", ready.json());
    assert!(
        log_lines("dataset=inplace")
            .iter()
            .any(|l| l.contains("ERROR") && l.contains("inplace.nc")),
        "{:#?}",
        log_lines("dataset=inplace")
    );

    replace(dir.path(), "inplace.nc", &original);
    let ready = poll_until(addr, "/readyz", 400, |r| r.json()["datasets"][0]["error"].is_null());
    assert!(ready.json()["datasets"][0]["error"].is_null(), "{}", ready.json());
    let again = get(addr, &url("-41,25,-25,65"), "");
    assert_eq!(again.status, 200, "{}", String::from_utf8_lossy(&again.body));
}

#[test]
fn requests_name_datasets_never_paths() {
    let server = serve(config(""));
    let addr = server.addr.as_str();
    let tidy = fixtures().join("tidy_nc4.nc").canonicalize().unwrap();
    let absolute = tidy.to_str().unwrap().to_string();
    let encoded = absolute.replace('/', "%2F");
    let targets = [
        "/v1/datasets/../../../../etc/passwd".to_string(),
        "/v1/datasets/..".to_string(),
        "/v1/datasets/../profile?bbox=0,40,10,50".to_string(),
        "/v1/datasets/tidy/../../../etc/passwd".to_string(),
        "/v1/datasets/%2e%2e".to_string(),
        "/v1/datasets/%2e%2e%2f%2e%2e%2fetc%2fpasswd".to_string(),
        "/v1/datasets/..%2F..%2Fetc%2Fpasswd/profile?bbox=0,40,10,50".to_string(),
        "/v1/datasets/%252e%252e%252fetc%252fpasswd".to_string(),
        "/v1/datasets/..%5C..%5Cetc%5Cpasswd".to_string(),
        "/v1/datasets/.%2e/.%2e/etc/passwd".to_string(),
        "/v1/datasets//etc/passwd".to_string(),
        "/v1/datasets/%2Fetc%2Fpasswd".to_string(),
        format!("/v1/datasets{absolute}"),
        format!("/v1/datasets/{encoded}"),
        format!("/v1/datasets/{encoded}/profile?bbox=0,40,10,50"),
        "/v1/datasets/tidy_nc4.nc".to_string(),
        "/v1/datasets/tidy_nc4.nc/profile?bbox=0,40,10,50".to_string(),
        "/v1/datasets/fixtures%2Ftidy_nc4.nc/profile?bbox=0,40,10,50".to_string(),
        "//etc/passwd".to_string(),
        "/etc/passwd".to_string(),
    ];
    for target in &targets {
        let a = get(addr, target, "");
        assert_eq!(a.status, 404, "{target}: {}", String::from_utf8_lossy(&a.body));
        let code = a.json()["error"]["code"].as_str().unwrap().to_string();
        assert!(code == "unknown_dataset" || code == "not_found", "{target}: {code}");
        let body = String::from_utf8_lossy(&a.body);
        assert!(!body.contains("root:"), "{target}: {body}");
        assert!(!body.contains("CDF") && !body.contains("HDF"), "{target}: {body}");
    }
    // The configured name works, so the 404s above are about the names.
    assert_eq!(get(addr, "/v1/datasets/tidy/profile?bbox=0,40,10,50", "").status, 200);
}

#[test]
fn cors_is_off_unless_origins_are_configured() {
    let server = serve(config(""));
    let addr = server.addr.as_str();
    let simple = get(addr, "/v1/datasets", "Origin: https://dash.example.org\r\n");
    assert_eq!(simple.status, 200);
    assert_eq!(simple.header("access-control-allow-origin"), None);
    let preflight = raw(
        addr,
        b"OPTIONS /v1/datasets HTTP/1.1\r\nHost: test\r\nOrigin: https://dash.example.org\r\n\
          Access-Control-Request-Method: GET\r\nConnection: close\r\n\r\n",
    );
    assert_eq!(preflight.status, 405);
    assert_eq!(preflight.header("access-control-allow-origin"), None);
    assert_eq!(preflight.header("access-control-allow-methods"), None);
}

#[test]
fn tokens_are_compared_and_never_logged() {
    let token = "tok-3c1f9a7e5b2d4c6e8a0b";
    let wrong = "tok-3c1f9a7e5b2d4c6e8a0c";
    let server = serve(config(&format!("tokens = [\"{token}\"]")));
    let addr = server.addr.as_str();
    let marker = "bbox=-7,41,7,53";
    let target = format!("/v1/datasets/tidy/profile?{marker}");
    assert_eq!(get(addr, &target, "").status, 401);
    assert_eq!(get(addr, &target, &format!("Authorization: Bearer {wrong}\r\n")).status, 401);
    assert_eq!(get(addr, &target, &format!("Authorization: bearer {token}\r\n")).status, 401);
    assert_eq!(get(addr, &target, &format!("Authorization: {token}\r\n")).status, 401);
    let ok = get(addr, &target, &format!("Authorization: Bearer {token}\r\n"));
    assert_eq!(ok.status, 200);
    let lines = log_lines(marker);
    assert_eq!(lines.len(), 5, "one line per request: {lines:#?}");
    assert_eq!(lines.iter().filter(|l| l.contains("status=401")).count(), 4, "{lines:#?}");
    let all = String::from_utf8_lossy(&log().lock().unwrap()).to_string();
    assert!(!all.contains(token) && !all.contains(wrong), "a token reached the log");
    assert!(!all.contains("3c1f9a7e5b2d4c6e8a0"), "part of a token reached the log");
}

#[test]
fn an_address_other_machines_reach_is_logged_as_a_warning() {
    let exposed = serve_on(config(""), "0.0.0.0:0");
    let port = exposed.addr.rsplit(':').next().unwrap().to_string();
    let reply = get(&exposed.addr, "/healthz", "");
    assert_eq!(reply.status, 200);
    let lines = log_lines(&format!("listening on 0.0.0.0:{port}"));
    assert!(
        lines.iter().any(|l| l.contains("WARN") && l.contains("no bearer tokens")),
        "{lines:#?}"
    );
    drop(exposed);

    let local = serve(config(""));
    assert_eq!(get(&local.addr, "/healthz", "").status, 200);
    assert!(log_lines(&format!("listening on {}", local.addr)).is_empty());

    for (addr, tokens, warns) in [
        ("127.0.0.1:8080", false, false),
        ("127.0.0.2:8080", false, false),
        ("[::1]:8080", false, false),
        ("0.0.0.0:8080", false, true),
        ("[::]:8080", true, true),
        ("192.0.2.7:8080", true, true),
    ] {
        let w = exposure_warning(addr.parse().unwrap(), tokens);
        assert_eq!(w.is_some(), warns, "{addr}");
        if let Some(w) = w {
            assert!(w.contains(if tokens { "bearer tokens guard" } else { "no bearer tokens" }));
        }
    }
}

#[test]
fn oversized_uris_and_headers_are_refused() {
    let server = serve(config(""));
    let addr = server.addr.as_str();
    let long = format!("/v1/datasets/tidy/profile?bbox=0,40,10,50&time={}", "1".repeat(9000));
    let a = get(addr, &long, "");
    assert_eq!(a.status, 414);
    assert_eq!(a.json()["error"]["code"], "uri_too_long");
    // Just under the URI limit: parsed, and refused for what it says.
    let under = format!("/v1/datasets?x={}", "1".repeat(8000));
    let b = get(addr, &under, "");
    assert_eq!(b.status, 400);
    assert_eq!(b.json()["error"]["code"], "unknown_parameter");
    let big_header = format!("X-Filler: {}\r\n", "a".repeat(20_000));
    assert_eq!(get(addr, "/healthz", &big_header).status, 431);
    let many: String = (0..80).map(|k| format!("X-H{k}: v\r\n")).collect();
    assert_eq!(get(addr, "/healthz", &many).status, 431);
    assert_eq!(get(addr, "/healthz", "").status, 200, "the service still answers");
}

#[test]
fn slow_clients_cannot_hold_a_worker_past_the_request_timeout() {
    // One box query at a time and no queue: a client holding the only place would make every
    // other query a 503.
    let limit = 2.0;
    let server = serve(config(&format!(
        "[limits]\nmax_concurrent = 1\nmax_queue = 0\nrequest_timeout_secs = {limit}"
    )));
    let addr = server.addr.clone();
    let timed_out_before = metric(&addr, "shearbox_connections_timed_out_total");

    // A client that sends its request a byte every 100 ms: it would take 8 s.
    let trickle_addr = addr.clone();
    let trickle = std::thread::spawn(move || {
        let mut s = TcpStream::connect(&trickle_addr).unwrap();
        let start = Instant::now();
        let request = b"GET /v1/datasets/tidy/profile?bbox=0,40,10,50 HTTP/1.1\r\nHost: t\r\nX: ................\r\n\r\n";
        for byte in request.iter() {
            if s.write_all(&[*byte]).is_err() {
                return (start.elapsed(), false);
            }
            std::thread::sleep(Duration::from_millis(100));
        }
        s.set_read_timeout(Some(Duration::from_secs(30))).unwrap();
        let mut answer = Vec::new();
        let _ = s.read_to_end(&mut answer);
        (start.elapsed(), answer.starts_with(b"HTTP/1.1 200"))
    });

    // A client that asks for gridded layers, pipelined, and never reads an answer.
    let mut sink = TcpStream::connect(&addr).unwrap();
    let grid = "GET /v1/datasets/global/layer?bottom=1000&top=200&bbox=-180,-90,180,90&grid=true \
                HTTP/1.1\r\nHost: t\r\n\r\n";
    let pipelined = grid.repeat(400);
    let writer = {
        let mut w = sink.try_clone().unwrap();
        std::thread::spawn(move || {
            let _ = w.write_all(pipelined.as_bytes());
        })
    };

    // Meanwhile other clients are served: neither slow client holds the only place.
    std::thread::sleep(Duration::from_millis(500));
    for west in [-30, -10, 10] {
        let a =
            get(&addr, &format!("/v1/datasets/tidy/profile?bbox={west},40,{},50", west + 20), "");
        assert_eq!(a.status, 200, "{}", String::from_utf8_lossy(&a.body));
    }
    assert_eq!(server.state.gate.in_flight(), 0);

    let (elapsed, answered) = trickle.join().unwrap();
    assert!(!answered, "the trickled request was answered after {elapsed:?}");
    assert!(
        elapsed < Duration::from_secs_f64(limit + 5.0),
        "the trickling client held its connection for {elapsed:?}"
    );

    // The reader that never read: after the limit its connection is closed with answers
    // still unsent; reading now drains what the socket buffers hold, then ends.
    std::thread::sleep(Duration::from_secs_f64(limit + 2.0));
    sink.set_read_timeout(Some(Duration::from_secs(20))).unwrap();
    let mut received = Vec::new();
    let end = sink.read_to_end(&mut received);
    let answers = received.windows(12).filter(|w| w == b"HTTP/1.1 200").count();
    assert!(
        end.is_ok() || end.as_ref().is_err_and(|e| e.kind() == std::io::ErrorKind::ConnectionReset),
        "the connection was not closed: {end:?} after {answers} answers"
    );
    assert!(answers < 400, "every answer was sent to a client that did not read");
    let _ = writer.join();
    assert_eq!(server.state.gate.in_flight(), 0);
    assert!(metric(&addr, "shearbox_connections_timed_out_total") >= timed_out_before + 2.0);
    assert_eq!(get(&addr, "/healthz", "").status, 200);
}
