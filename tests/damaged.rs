//! Damaged and foreign files: the binary answers each with a result or a clear error, never a
//! panic, a crash or a hang, and `compute` never leaves a partial file.
//!
//! Inputs: several hundred damaged copies of the committed fixtures (truncated at many
//! offsets, single bytes flipped across the header, and variants made with netCDF-C's `ncgen`
//! from edited `ncdump` text: attributes of the wrong type, a coordinate variable of the wrong
//! length, variables whose every value is out of their valid range), and the netCDF-C
//! library's own test files (`tests/data/netcdf-c-test-files`, the `.cdl` ones made into files
//! with `ncgen`, skipping those it rejects).

use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

mod common;

use common::root;

const FIXTURES: [&str; 8] = [
    "tidy_nc4.nc",
    "packed_classic.nc",
    "global_noleap.nc",
    "antimeridian_360day.nc",
    "permuted_julian.nc",
    "short_names_allleap.nc",
    "temperature_only.nc",
    "cyclic_duplicate.nc",
];

/// Time allowed to one run on one small file (a hang fails the test).
const LIMIT: Duration = Duration::from_secs(30);

/// How one run ended.
struct Outcome {
    code: Option<i32>,
    stderr: String,
    timed_out: bool,
}

fn run(args: &[&str]) -> Outcome {
    let mut child = Command::new(env!("CARGO_BIN_EXE_shearbox"))
        .args(args)
        .env_remove("RUST_BACKTRACE")
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .expect("binary runs");
    let start = Instant::now();
    let mut timed_out = false;
    loop {
        if child.try_wait().unwrap().is_some() {
            break;
        }
        if start.elapsed() > LIMIT {
            let _ = child.kill();
            timed_out = true;
            break;
        }
        std::thread::sleep(Duration::from_millis(5));
    }
    let out = child.wait_with_output().unwrap();
    Outcome {
        code: out.status.code(),
        stderr: String::from_utf8_lossy(&out.stderr).into(),
        timed_out,
    }
}

/// A run's verdict: `None` when it ended well (success, or an error message of ours).
fn problem(what: &str, o: &Outcome) -> Option<String> {
    if o.timed_out {
        return Some(format!("{what}: no answer within {LIMIT:?}"));
    }
    if o.stderr.contains("panicked") {
        return Some(format!("{what}: panic: {}", o.stderr));
    }
    match o.code {
        Some(0) => None,
        Some(1) if o.stderr.contains("shearbox: error: ") => None,
        Some(c) => Some(format!("{what}: exit status {c}: {}", o.stderr)),
        None => Some(format!("{what}: killed by a signal: {}", o.stderr)),
    }
}

/// Runs `inspect`, `profile` and (when `compute`) `compute` on `file`; returns the problems.
fn check_file(file: &Path, compute: bool, scratch: &Path) -> Vec<String> {
    let f = file.to_str().unwrap();
    let mut problems = Vec::new();
    problems.extend(problem(&format!("inspect {f}"), &run(&["inspect", f])));
    problems.extend(problem(
        &format!("profile {f}"),
        &run(&["profile", f, "--bbox=-180,-90,180,90", "--format", "table"]),
    ));
    if compute {
        let out = scratch.join(format!(
            "{}.out.nc",
            file.file_name().unwrap().to_string_lossy().replace('.', "_")
        ));
        let o = run(&["compute", f, "-o", out.to_str().unwrap(), "-q"]);
        problems.extend(problem(&format!("compute {f}"), &o));
        match o.code {
            Some(0) => {
                if let Err(e) = shearbox_cf::write::PartFile::open(&out) {
                    problems.push(format!("compute {f}: its output does not read back: {e}"));
                }
            }
            _ => {
                if out.exists() {
                    problems.push(format!("compute {f}: failed but left {}", out.display()));
                }
            }
        }
        let _ = std::fs::remove_file(&out);
    }
    problems
}

/// Checks `files` on two threads; panics listing every problem.
fn check_all(files: Vec<PathBuf>, compute: bool, scratch: &Path) -> usize {
    let n = files.len();
    let (a, b) = files.split_at(n / 2);
    let problems: Vec<String> = std::thread::scope(|s| {
        let h =
            s.spawn(|| a.iter().flat_map(|f| check_file(f, compute, scratch)).collect::<Vec<_>>());
        let mut p: Vec<String> = b.iter().flat_map(|f| check_file(f, compute, scratch)).collect();
        p.extend(h.join().unwrap());
        p
    });
    let temps: Vec<String> = std::fs::read_dir(scratch)
        .unwrap()
        .filter_map(Result::ok)
        .map(|e| e.file_name().to_string_lossy().into_owned())
        .filter(|n| n.contains(".tmp-"))
        .collect();
    assert!(temps.is_empty(), "temporary files left: {temps:?}");
    assert!(problems.is_empty(), "{} problem(s):\n{}", problems.len(), problems.join("\n"));
    n
}

/// Truncated copies and copies with one byte of the header flipped.
fn damaged_copies(dir: &Path) -> Vec<PathBuf> {
    let mut out = Vec::new();
    for name in FIXTURES {
        let bytes = std::fs::read(root().join("fixtures").join(name)).unwrap();
        let n = bytes.len();
        let stem = name.trim_end_matches(".nc");
        let mut cuts: Vec<usize> =
            vec![0, 1, 3, 4, 7, 8, 12, 16, 32, 64, 128, 300, 700, 1500, 3000];
        cuts.extend([n / 16, n / 8, n / 4, n / 3, n / 2, 2 * n / 3, 3 * n / 4, n - 100, n - 1]);
        cuts.retain(|&c| c < n);
        cuts.sort_unstable();
        cuts.dedup();
        for c in cuts {
            let p = dir.join(format!("{stem}_cut{c}.nc"));
            std::fs::write(&p, &bytes[..c]).unwrap();
            out.push(p);
        }
        // The header holds the structure; flip bytes spread over its first 2 KB.
        for pos in (0..n.min(2048)).step_by(67) {
            let mut copy = bytes.clone();
            copy[pos] ^= 0xff;
            let p = dir.join(format!("{stem}_flip{pos}.nc"));
            std::fs::write(&p, &copy).unwrap();
            out.push(p);
        }
    }
    out
}

/// Variants written by ncgen from edited ncdump text of the tidy fixture.
fn edited_variants(dir: &Path) -> Vec<PathBuf> {
    let dump = Command::new("ncdump").arg(root().join("fixtures/tidy_nc4.nc")).output().unwrap();
    assert!(dump.status.success());
    let cdl = String::from_utf8(dump.stdout).unwrap();
    let edits: [(&str, &[(&str, &str)]); 8] = [
        ("units_number", &[("lat:units = \"degrees_north\" ;", "lat:units = 5 ;")]),
        (
            "time_units_number",
            &[("time:units = \"hours since 2026-01-14 00:00:00\" ;", "time:units = 3.5 ;")],
        ),
        ("calendar_number", &[("time:calendar = \"standard\" ;", "time:calendar = 360 ;")]),
        (
            "scale_text",
            &[("t:units = \"K\" ;", "t:units = \"K\" ;\n\t\tt:scale_factor = \"double\" ;")],
        ),
        (
            "z_all_invalid",
            &[("z:units = \"m2 s-2\" ;", "z:units = \"m2 s-2\" ;\n\t\tz:valid_max = -1.e+30f ;")],
        ),
        (
            "t_all_invalid",
            &[("t:units = \"K\" ;", "t:units = \"K\" ;\n\t\tt:valid_range = 0.f, 1.f ;")],
        ),
        (
            "lat_wrong_length",
            &[
                ("\tlat = 21 ;", "\tlat = 21 ;\n\tlatb = 20 ;"),
                ("float lat(lat) ;", "float lat(latb) ;"),
            ],
        ),
        ("level_units_unknown", &[("level:units = \"hPa\" ;", "level:units = \"furlongs\" ;")]),
    ];
    let mut out = Vec::new();
    for (name, list) in edits {
        let mut text = cdl.clone();
        for (from, to) in list {
            assert!(text.contains(from), "{name}: the dump lacks {from:?}");
            text = text.replacen(from, to, 1);
        }
        if name == "lat_wrong_length" {
            // 20 latitudes for the new dimension: drop the last value of the lat data.
            let start = text.find("\n lat = ").unwrap();
            let end = start + text[start..].find(';').unwrap();
            let values: Vec<&str> = text[start + 8..end].split(',').collect();
            let shorter = values[..values.len() - 1].join(",");
            text = format!("{}\n lat = {shorter}{}", &text[..start], &text[end..]);
        }
        let cdl_path = dir.join(format!("{name}.cdl"));
        std::fs::write(&cdl_path, &text).unwrap();
        let nc = dir.join(format!("edited_{name}.nc"));
        let made = Command::new("ncgen")
            .args(["-k", "nc4", "-o"])
            .arg(&nc)
            .arg(&cdl_path)
            .status()
            .unwrap();
        if made.success() {
            out.push(nc);
        }
    }
    out
}

#[test]
fn damaged_fixtures_get_an_answer_never_a_crash() {
    let dir = tempfile::tempdir().unwrap();
    let mut files = damaged_copies(dir.path());
    let edited = edited_variants(dir.path());
    // Every edit is valid CDL: ncgen must have made each one.
    assert_eq!(edited.len(), 8, "ncgen refused an edited fixture");
    files.extend(edited);
    let n = check_all(files, true, dir.path());
    assert!(n >= 300, "only {n} damaged files");
}

#[test]
fn the_edited_fixtures_fail_for_the_right_reason() {
    let dir = tempfile::tempdir().unwrap();
    let edited = edited_variants(dir.path());
    let expect = [
        ("units_number", ""),
        ("time_units_number", "units"),
        ("level_units_unknown", "furlongs"),
        ("lat_wrong_length", "lat"),
    ];
    for (name, needle) in expect {
        let file = edited.iter().find(|p| p.to_string_lossy().contains(name)).unwrap();
        let o = run(&["inspect", file.to_str().unwrap()]);
        assert!(problem(name, &o).is_none(), "{name}: {}", o.stderr);
        if o.code == Some(1) {
            assert!(o.stderr.contains(needle), "{name}: {}", o.stderr);
        }
    }
    // Every value of z outside its valid range: geopotential is there but all missing, so a
    // profile has no defined geostrophic wind anywhere (or refuses with a reason).
    let file = edited.iter().find(|p| p.to_string_lossy().contains("z_all_invalid")).unwrap();
    let out = Command::new(env!("CARGO_BIN_EXE_shearbox"))
        .args(["profile", file.to_str().unwrap(), "--bbox=-10,40,10,60"])
        .output()
        .unwrap();
    if out.status.success() {
        let doc: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
        for level in doc["levels"].as_array().unwrap() {
            assert!(level["geostrophic_wind"].is_null(), "{level}");
            assert_eq!(level["valid_cells"], 0);
        }
    }
}

#[test]
fn the_netcdf_c_test_files_get_a_clear_answer() {
    let corpus = root().join("tests/data/netcdf-c-test-files");
    let dir = tempfile::tempdir().unwrap();
    let mut files = Vec::new();
    let (mut made, mut refused) = (0, 0);
    let mut entries: Vec<PathBuf> =
        std::fs::read_dir(&corpus).unwrap().filter_map(Result::ok).map(|e| e.path()).collect();
    entries.sort();
    for path in entries {
        match path.extension().and_then(|e| e.to_str()) {
            Some("nc") => files.push(path),
            Some("cdl") => {
                let nc = dir.path().join(path.file_stem().unwrap()).with_extension("nc");
                let ok = |k: Option<&str>| {
                    let mut c = Command::new("ncgen");
                    if let Some(k) = k {
                        c.args(["-k", k]);
                    }
                    c.arg("-o").arg(&nc).arg(&path).stderr(Stdio::null()).stdout(Stdio::null());
                    c.status().is_ok_and(|s| s.success())
                };
                if ok(None) || ok(Some("nc4")) {
                    made += 1;
                    files.push(nc);
                } else {
                    refused += 1;
                }
            }
            _ => {}
        }
    }
    // netCDF-C's corpus (commit 2ed1b285): 27 binary files, 266 CDL texts of which ncgen
    // makes 242 on this machine (some are meant to fail).
    assert!(made >= 200, "ncgen made only {made} files ({refused} refused)");
    let n = check_all(files, false, dir.path());
    assert!(n >= 250, "{n}");
}
