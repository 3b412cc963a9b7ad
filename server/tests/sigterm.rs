//! SIGTERM while box queries are running: the queries admitted before the signal are answered
//! in full, then the service stops; connections not yet accepted are refused. A test binary of its own, since the signal goes to the whole
//! process (the service's handler catches it once `run` is serving).

mod common;

use common::{Sink, agent};

use std::sync::{Arc, Mutex};
use std::time::Duration;

use shearbox_server::app::{run, shutdown_signal};
use shearbox_server::state::AppState;

#[test]
fn sigterm_during_queries_finishes_them_before_exit() {
    let log = Arc::new(Mutex::new(Vec::new()));
    let sink = Arc::clone(&log);
    tracing::subscriber::set_global_default(
        tracing_subscriber::fmt()
            .with_ansi(false)
            .with_writer(move || Sink(Arc::clone(&sink)))
            .finish(),
    )
    .unwrap();
    // One query at a time, nothing cached: the queries below run one after another.
    let state =
        AppState::new(common::config("cache_mb = 0\n[limits]\nmax_concurrent = 1\nmax_queue = 64"));
    let listener = std::net::TcpListener::bind("127.0.0.1:0").unwrap();
    listener.set_nonblocking(true).unwrap();
    let base = format!("http://{}", listener.local_addr().unwrap());
    let serving = state.clone();
    let server = std::thread::spawn(move || {
        let runtime = tokio::runtime::Builder::new_multi_thread().enable_all().build()?;
        runtime.block_on(async move {
            let listener = tokio::net::TcpListener::from_std(listener)?;
            run(listener, serving, shutdown_signal()).await
        })
    });
    // Serving means the signal handler is installed: `run` polls the shutdown future before
    // it accepts the first connection.
    let health = agent().get(format!("{base}/healthz")).call().unwrap();
    assert_eq!(health.status(), 200);

    let queries: Vec<_> = (0..48)
        .map(|k| {
            let url = format!(
                "{base}/v1/datasets/global/profile?bbox={},-80,{},80&time=latest",
                -180 + 5 * k,
                175 - 5 * (k % 7)
            );
            std::thread::spawn(move || {
                // A request still connecting when the listener closes is refused: that is an
                // error here, never a partial answer.
                let mut r = agent().get(&url).call().map_err(|e| e.to_string())?;
                let body = r.body_mut().read_to_string().map_err(|e| e.to_string())?;
                Ok::<_, String>((r.status().as_u16(), body))
            })
        })
        .collect();
    let mut waited = 0;
    while state.gate.in_flight() < 2 && waited < 2000 {
        std::thread::sleep(Duration::from_millis(1));
        waited += 1;
    }
    let admitted = state.gate.in_flight();
    assert!(admitted >= 2, "the queries did not start");
    let pid = std::process::id().to_string();
    let sent = std::process::Command::new("kill").args(["-TERM", &pid]).status().unwrap();
    assert!(sent.success());

    // Every answer is a whole 200 document; at least the queries admitted at the signal
    // were answered.
    let mut answered = 0;
    for q in queries {
        if let Ok((status, body)) = q.join().unwrap() {
            assert_eq!(status, 200, "{body}");
            let doc: serde_json::Value = serde_json::from_str(&body).expect("a whole document");
            assert!(doc["layers"].as_array().is_some_and(|l| !l.is_empty()), "{body}");
            answered += 1;
        }
    }
    assert!(answered >= admitted, "{answered} answered, {admitted} admitted at the signal");
    server.join().unwrap().expect("a clean stop");
    assert_eq!(state.gate.in_flight(), 0);
    assert!(std::net::TcpStream::connect(base.trim_start_matches("http://")).is_err());

    let text = String::from_utf8(log.lock().unwrap().clone()).unwrap();
    let lines: Vec<&str> = text.lines().collect();
    let signal = lines.iter().position(|l| l.contains("SIGTERM received")).expect("logged");
    let answered_after = lines[signal..]
        .iter()
        .filter(|l| l.contains("route=/v1/datasets/{name}/profile") && l.contains("status=200"))
        .count();
    assert!(answered_after >= 1, "no query was still running at the signal:\n{text}");
}
