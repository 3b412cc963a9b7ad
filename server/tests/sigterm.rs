//! SIGTERM while box queries are running: every query admitted before the signal is answered,
//! then the service stops. A test binary of its own, since the signal goes to the whole
//! process (the service's handler catches it once `run` is serving).

mod common;

use std::io::Write;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use shearbox_server::app::{run, shutdown_signal};
use shearbox_server::state::AppState;

struct Sink(Arc<Mutex<Vec<u8>>>);

impl Write for Sink {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.0.lock().unwrap().extend_from_slice(buf);
        Ok(buf.len())
    }
    fn flush(&mut self) -> std::io::Result<()> {
        Ok(())
    }
}

fn agent() -> ureq::Agent {
    ureq::Agent::config_builder()
        .http_status_as_error(false)
        .timeout_global(Some(Duration::from_secs(60)))
        .build()
        .into()
}

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

    let queries: Vec<_> = (0..24)
        .map(|k| {
            let url = format!(
                "{base}/v1/datasets/global/profile?bbox={},-80,{},80&time=latest",
                -180 + 5 * k,
                175 - 5 * (k % 7)
            );
            std::thread::spawn(move || {
                let mut r = agent().get(&url).call().unwrap();
                (r.status().as_u16(), r.body_mut().read_to_string().unwrap())
            })
        })
        .collect();
    let mut waited = 0;
    while state.gate.in_flight() < 2 && waited < 2000 {
        std::thread::sleep(Duration::from_millis(1));
        waited += 1;
    }
    assert!(state.gate.in_flight() >= 2, "the queries did not start");
    let pid = std::process::id().to_string();
    let sent = std::process::Command::new("kill").args(["-TERM", &pid]).status().unwrap();
    assert!(sent.success());

    for q in queries {
        let (status, body) = q.join().unwrap();
        assert_eq!(status, 200, "{body}");
        assert!(body.contains("\"layers\""), "{body}");
    }
    server.join().unwrap().expect("a clean stop");
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
