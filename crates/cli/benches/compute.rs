//! End-to-end benchmark of `shearbox compute` against its I/O ceiling.
//!
//! Input: the demo dataset (0.5° grid of 121 × 201 cells, 17 levels, 8 six-hourly steps,
//! NetCDF-4 with deflate; `fixtures/demo/kestrel_gap.nc`, generated on first use). Measured
//! side by side in one run, best of three each:
//! - the I/O ceiling: reading the same variables of every step with the same reader
//!   (`Dataset::read_fields`, the whole grid, one step at a time) and nothing else;
//! - `shearbox compute` on the file (every adjacent layer), as a whole process, wall time,
//!   with the output uncompressed and with the default deflate level 1 and shuffle (the
//!   difference is the compression, which the netCDF library runs on one thread).
//!
//! `cargo bench -p shearbox --bench compute` prints a table and writes
//! `target/bench/compute.json`.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use shearbox_cf::{Dataset, VarOverrides};

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

fn best_of(runs: usize, mut f: impl FnMut()) -> f64 {
    let mut best = f64::INFINITY;
    for _ in 0..runs {
        let start = Instant::now();
        f();
        best = best.min(start.elapsed().as_secs_f64());
    }
    best
}

fn demo() -> PathBuf {
    let path = root().join("fixtures/demo/kestrel_gap.nc");
    if !path.exists() {
        let status = Command::new(env!("CARGO"))
            .args(["run", "--release", "-q", "-p", "shearbox-fixtures", "--", "demo"])
            .arg(root().join("fixtures/demo"))
            .status()
            .expect("cargo runs");
        assert!(status.success(), "generating the demo dataset");
    }
    path
}

fn main() {
    let input = demo();
    let file_mb = std::fs::metadata(&input).unwrap().len() as f64 / 1e6;
    let ds = Dataset::open(&input, &VarOverrides::default()).unwrap();
    let steps = ds.n_steps();
    let mut decoded = 0usize;
    let read = best_of(3, || {
        decoded = 0;
        for t in 0..steps {
            let f = ds.read_fields(t, None).unwrap();
            let n3 = [f.geopotential_height(), f.temperature(), f.specific_humidity()]
                .iter()
                .flatten()
                .map(|a| a.len())
                .sum::<usize>()
                + f.wind().map_or(0, |(u, v)| u.len() + v.len());
            let n2 = [f.surface_pressure(), f.surface_height()]
                .iter()
                .flatten()
                .map(|a| a.len())
                .sum::<usize>();
            decoded += (n3 + n2) * 4;
        }
    });
    drop(ds);
    let out_dir = root().join("target/bench");
    std::fs::create_dir_all(&out_dir).unwrap();
    let out = out_dir.join("compute_out.nc");
    let run = |deflate: &str| {
        best_of(3, || {
            let status = Command::new(env!("CARGO_BIN_EXE_shearbox"))
                .args(["compute"])
                .arg(&input)
                .arg("-o")
                .arg(&out)
                .args(["--force", "-q", "--deflate", deflate])
                .status()
                .unwrap();
            assert!(status.success());
        })
    };
    let plain = run("0");
    let compute = run("1");
    let out_mb = std::fs::metadata(&out).unwrap().len() as f64 / 1e6;
    let decoded_mb = decoded as f64 / 1e6;
    let threads = std::thread::available_parallelism().map_or(1, usize::from);
    println!(
        "compute benchmark: {steps} steps of 121 x 201 cells x 17 levels, {file_mb:.1} MB on disk \
         ({decoded_mb:.1} MB decoded), {threads} threads"
    );
    println!("| run | wall s | steps/s | file MB/s | decoded MB/s | ÷ read alone |");
    println!("|---|---|---|---|---|---|");
    for (name, secs) in [
        ("read the inputs alone (I/O ceiling)", read),
        ("shearbox compute, output uncompressed (--deflate 0)", plain),
        ("shearbox compute (deflate 1 + shuffle, the default)", compute),
    ] {
        println!(
            "| {name} | {secs:.2} | {:.2} | {:.1} | {:.1} | {:.2} |",
            steps as f64 / secs,
            file_mb / secs,
            decoded_mb / secs,
            secs / read
        );
    }
    println!("output: {out_mb:.1} MB (NetCDF-4, deflate 1 + shuffle)");
    let json = format!(
        "{{\"steps\":{steps},\"file_mb\":{file_mb},\"decoded_mb\":{decoded_mb},\"output_mb\":{out_mb},\
         \"threads\":{threads},\"read_s\":{read},\"compute_uncompressed_s\":{plain},\"compute_s\":{compute},\"ratio\":{}}}\n",
        compute / read
    );
    std::fs::write(out_dir.join("compute.json"), json).unwrap();
    let _ = std::fs::remove_file(&out);
}
