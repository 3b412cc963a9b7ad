//! End-to-end tests of `shearbox serve`: the binary serving the committed fixtures on
//! 127.0.0.1:0, called with a real HTTP client, and compared with what `shearbox profile`
//! prints for the same file, box, time and layer.

use std::io::{BufRead, BufReader};
use std::path::Path;
use std::process::{Child, Command, Stdio};
use std::sync::mpsc;
use std::sync::{Arc, Mutex};
use std::time::Duration;

use serde_json::Value;

mod common;

use common::{fixture, root};

/// A running `shearbox serve` and the lines it has logged.
struct Served {
    child: Child,
    base: String,
    log: Arc<Mutex<Vec<String>>>,
    reader: Option<std::thread::JoinHandle<()>>,
}

impl Served {
    fn start(args: &[String], cwd: &Path) -> Served {
        let mut child = Command::new(env!("CARGO_BIN_EXE_shearbox"))
            .arg("serve")
            .args(args)
            .args(["--bind", "127.0.0.1:0"])
            .current_dir(cwd)
            .env("SHEARBOX_LOG", "info")
            .stdout(Stdio::null())
            .stderr(Stdio::piped())
            .spawn()
            .expect("the binary starts");
        let stderr = child.stderr.take().unwrap();
        let log = Arc::new(Mutex::new(Vec::new()));
        let (tx, rx) = mpsc::channel();
        let lines = Arc::clone(&log);
        // Keep reading standard error, so that the log never fills the pipe.
        let reader = std::thread::spawn(move || {
            for line in BufReader::new(stderr).lines().map_while(Result::ok) {
                let addr = line.split("listening on http://").nth(1);
                if let Some(addr) = addr.and_then(|a| a.split_whitespace().next()) {
                    let _ = tx.send(addr.to_string());
                }
                lines.lock().unwrap().push(line);
            }
        });
        let addr = rx.recv_timeout(Duration::from_secs(60)).unwrap_or_else(|_| {
            let _ = child.kill();
            panic!("no address logged: {:?}", log.lock().unwrap())
        });
        Served { child, base: format!("http://{addr}"), log, reader: Some(reader) }
    }

    fn get(&self, path: &str) -> (u16, Value) {
        let agent: ureq::Agent = ureq::Agent::config_builder()
            .http_status_as_error(false)
            .timeout_global(Some(Duration::from_secs(60)))
            .build()
            .into();
        let mut reply = agent.get(format!("{}{path}", self.base)).call().expect("an answer");
        let status = reply.status().as_u16();
        let text = reply.body_mut().read_to_string().unwrap();
        (status, serde_json::from_str(&text).unwrap_or_else(|e| panic!("{e}: {text}")))
    }

    /// Sends `signal` and waits for the process to end; true when it exited with success.
    fn stop_with(mut self, signal: &str) -> (bool, Vec<String>) {
        let pid = self.child.id().to_string();
        let sent = Command::new("kill").args([signal, &pid]).status().expect("kill runs");
        assert!(sent.success());
        let status = self.child.wait().expect("the process ends");
        // The reader thread ends when the pipe closes, after the last line.
        if let Some(reader) = self.reader.take() {
            reader.join().expect("the reader thread ends");
        }
        let log = self.log.lock().unwrap().clone();
        (status.success(), log)
    }
}

impl Drop for Served {
    fn drop(&mut self) {
        let _ = self.child.kill();
        let _ = self.child.wait();
    }
}

fn cli_profile(file: &str, bbox: &str, time: &str, layer: Option<&str>) -> Value {
    let mut cmd = Command::new(env!("CARGO_BIN_EXE_shearbox"));
    cmd.arg("profile").arg(fixture(file)).arg(format!("--bbox={bbox}")).args(["--time", time]);
    if let Some(layer) = layer {
        cmd.args(["--layer", layer]);
    }
    let out = cmd.output().expect("the binary runs");
    assert!(out.status.success(), "{}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).expect("JSON")
}

#[test]
fn the_service_answers_what_the_command_line_prints() {
    let files = ["tidy_nc4.nc", "packed_classic.nc", "global_noleap.nc", "antimeridian_360day.nc"];
    // Each dataset is named by its file name, so that the documents match to the byte.
    let args: Vec<String> = files
        .iter()
        .flat_map(|f| ["--data".to_string(), format!("{f}={}", fixture(f).display())])
        .collect();
    let served = Served::start(&args, &root());
    let cases = [
        ("tidy_nc4.nc", "-10,40,10,55", "latest", None),
        ("tidy_nc4.nc", "-30,25,20,65", "2026-01-14T06:00Z", Some("1000-500")),
        // int16 packing and gaps inside the box.
        ("packed_classic.nc", "0,45,10,55", "2026-01-14", None),
        ("packed_classic.nc", "0,45,10,55", "latest", Some("850-300")),
        // Across the seam of a periodic grid, and a noleap calendar.
        ("global_noleap.nc", "350,30,15,60", "2000-03-01T00:00Z", None),
        // Across the antimeridian of a regional grid, a 360_day calendar, the equator band.
        ("antimeridian_360day.nc", "170,-35,-170,5", "latest", Some("1000-500")),
    ];
    for (file, bbox, time, layer) in cases {
        let want = cli_profile(file, bbox, time, layer);
        let path = match layer {
            None => format!("/v1/datasets/{file}/profile?bbox={bbox}&time={time}"),
            Some(l) => {
                let (bottom, top) = l.split_once('-').unwrap();
                format!(
                    "/v1/datasets/{file}/layer?bottom={bottom}&top={top}&bbox={bbox}&time={time}"
                )
            }
        };
        let (status, got) = served.get(&path);
        assert_eq!(status, 200, "{path}: {got}");
        assert_eq!(got, want, "{path}");
        assert!(!want["layers"].as_array().unwrap().is_empty());
    }
    let (status, err) = served.get("/v1/datasets/tidy_nc4.nc/profile?bbox=0,40,10");
    assert_eq!(status, 400);
    assert_eq!(err["error"]["code"], "invalid_bbox");

    let (clean, log) = served.stop_with("-TERM");
    assert!(clean, "{log:?}");
    let request_lines: Vec<&String> = log.iter().filter(|l| l.contains(" request ")).collect();
    assert!(
        request_lines.iter().any(|l| l.contains("route=/v1/datasets/{name}/profile")
            && l.contains("status=200")
            && l.contains("latency_ms=")),
        "{log:?}"
    );
    assert!(request_lines.iter().any(|l| l.contains("status=400")), "{log:?}");
    assert!(log.iter().any(|l| l.contains("SIGTERM")), "{log:?}");
}

#[test]
fn without_data_it_names_the_command_that_makes_the_demo() {
    let dir = tempfile::tempdir().unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_shearbox"))
        .args(["serve", "--bind", "127.0.0.1:0"])
        .current_dir(dir.path())
        .output()
        .expect("the binary runs");
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("target/release/shearbox-fixtures demo fixtures/demo"), "{err}");
    assert!(err.contains("fixtures/demo/kestrel_gap.nc"), "{err}");
}

#[test]
fn without_data_it_serves_the_demo_file() {
    // Any valid file stands in for the demo here: the test is of where `serve` looks.
    let dir = tempfile::tempdir().unwrap();
    std::fs::create_dir_all(dir.path().join("fixtures/demo")).unwrap();
    std::fs::copy(fixture("tidy_nc4.nc"), dir.path().join("fixtures/demo/kestrel_gap.nc")).unwrap();
    let served = Served::start(&[], dir.path());
    let (status, list) = served.get("/v1/datasets");
    assert_eq!(status, 200);
    assert_eq!(list["datasets"][0]["name"], "demo");
    let (status, ready) = served.get("/readyz");
    assert_eq!(status, 200);
    assert_eq!(ready["datasets"][0]["file"], "kestrel_gap.nc");
    let (clean, log) = served.stop_with("-INT");
    assert!(clean, "{log:?}");
}

#[test]
fn a_configuration_file_is_read_and_a_bad_one_refused() {
    let dir = tempfile::tempdir().unwrap();
    let config = dir.path().join("serve.toml");
    let text = format!(
        "bind = \"127.0.0.1:1\"\n[limits]\nmax_grid_cells = 10\n[datasets]\ntidy = \"{}\"\n",
        fixture("tidy_nc4.nc").display()
    );
    std::fs::write(&config, text).unwrap();
    // --bind (127.0.0.1:0, added by `start`) overrides the file's address.
    let served = Served::start(&["--config".into(), config.display().to_string()], dir.path());
    let (status, list) = served.get("/v1/datasets");
    assert_eq!(status, 200);
    assert_eq!(list["datasets"][0]["name"], "tidy");
    let (status, err) =
        served.get("/v1/datasets/tidy/layer?bottom=1000&top=500&bbox=-10,40,10,55&grid=true");
    assert_eq!(status, 413, "{err}");
    drop(served);

    std::fs::write(&config, "[limits]\nmax_queue = 3\nmax_qeue = 4\n").unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_shearbox"))
        .args(["serve", "--config"])
        .arg(&config)
        .output()
        .expect("the binary runs");
    assert!(!out.status.success());
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(err.contains("serve.toml") && err.contains("max_qeue"), "{err}");
}
