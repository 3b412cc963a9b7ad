//! End-to-end benchmark of `shearbox compute` against its I/O ceiling.
//!
//! Input: the demo dataset (0.5° grid of 121 × 201 cells, 17 levels, 8 six-hourly steps,
//! NetCDF-4 with deflate; `fixtures/demo/kestrel_gap.nc`, generated on first use). Measured
//! side by side in one run, best of three each:
//! - the I/O ceiling: reading the same variables of every step with the same reader
//!   (`Dataset::read_fields`, the whole grid, one step at a time) and nothing else;
//! - the I/O ceiling with writing: the same reads, and every step's output written with the same
//!   writer, shape and compression (`OutputFile` with the default direct writer, the layout of
//!   `shearbox compute`, the values of the first step computed once beforehand, so the data
//!   compress as real output does), and no computation; also with the netCDF library's writer;
//! - `shearbox compute` on the file (every adjacent layer), as a whole process, wall time,
//!   with the output uncompressed and with the default deflate level 1 and shuffle (the
//!   difference is the compression, which the netCDF library runs on one thread);
//! - when `tests/reference/.venv` exists (made by `scripts/test`), the same job scripted with
//!   numpy and netCDF4 (`numpy_compute.py`: the project's numpy reference computing every
//!   layer, writing the same variables with the same chunks and compression), once.
//!
//! `cargo bench -p shearbox --bench compute` prints a table and writes
//! `target/bench/compute.json`.

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use shearbox_cf::output::{DiagnosticsLayout, Provenance};
use shearbox_cf::write::{OutputFile, Writer};
use shearbox_cf::{Dataset, VarOverrides};
use shearbox_core::{Config, compute};

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
            decoded += f.n_values() * std::mem::size_of::<f32>();
        }
    });
    let out_dir = root().join("target/bench");
    std::fs::create_dir_all(&out_dir).unwrap();
    let out = out_dir.join("compute_out.nc");
    let layers = ds.levels().adjacent_layers();
    let layout = DiagnosticsLayout::new(&ds, &layers);
    let prov = Provenance {
        history: String::new(),
        source: String::new(),
        comment: String::new(),
        config: Config::default(),
        deflate: Some(1),
    };
    let first = layout.step_values(&compute(
        &ds.read_fields(0, None).unwrap(),
        &layers,
        &Config::default(),
    ));
    let read_write_with = |writer: Writer| {
        best_of(3, || {
            let mut file = OutputFile::create_with(&out, layout.header(&prov), writer).unwrap();
            // The value buffers are reused from step to step, as `shearbox compute` does.
            let mut spare: Vec<(String, Vec<f32>)> = Vec::new();
            for t in 0..steps {
                let f = ds.read_fields(t, None).unwrap();
                drop(f);
                let mut values = std::mem::take(&mut spare);
                if values.is_empty() {
                    values = first.clone();
                } else {
                    for ((_, dst), (_, src)) in values.iter_mut().zip(&first) {
                        dst.extend_from_slice(src);
                    }
                }
                spare = file.write_step_returning(t as f64, values).unwrap();
            }
            file.close().unwrap();
        })
    };
    let read_write = read_write_with(Writer::Direct);
    let read_write_library = read_write_with(Writer::Library);
    drop(ds);
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
    // Peak memory of one default run, from its own summary.
    let logged = Command::new(env!("CARGO_BIN_EXE_shearbox"))
        .args(["compute"])
        .arg(&input)
        .arg("-o")
        .arg(&out)
        .arg("--force")
        .output()
        .unwrap();
    let log = String::from_utf8_lossy(&logged.stderr);
    let peak_mib: f64 = log
        .split("peak memory ")
        .nth(1)
        .and_then(|t| t.split_whitespace().next())
        .and_then(|n| n.parse().ok())
        .unwrap_or(f64::NAN);
    let compute = run("1");
    let out_mb = std::fs::metadata(&out).unwrap().len() as f64 / 1e6;
    let py = root().join("tests/reference/.venv/bin/python");
    let numpy = py.exists().then(|| {
        let np_out = out_dir.join("numpy_out.nc");
        let output = Command::new(&py)
            .arg(root().join("crates/cli/benches/numpy_compute.py"))
            .arg(&input)
            .arg(&np_out)
            .output()
            .expect("python runs");
        assert!(output.status.success(), "{}", String::from_utf8_lossy(&output.stderr));
        let _ = std::fs::remove_file(&np_out);
        String::from_utf8_lossy(&output.stdout).trim().parse::<f64>().expect("seconds")
    });
    let decoded_mb = decoded as f64 / 1e6;
    let threads = std::thread::available_parallelism().map_or(1, usize::from);
    println!(
        "compute benchmark: {steps} steps of 121 x 201 cells x 17 levels, {file_mb:.1} MB on disk \
         ({decoded_mb:.1} MB decoded), {threads} threads"
    );
    let mut rows = vec![
        ("read the inputs alone (I/O ceiling of reading)", read),
        (
            "read the inputs and write outputs of the same shape and compression, no computation (I/O ceiling)",
            read_write,
        ),
        (
            "the same through the netCDF library's writer (compression on one thread)",
            read_write_library,
        ),
        ("shearbox compute, output uncompressed (--deflate 0)", plain),
        ("shearbox compute (deflate 1 + shuffle, the default)", compute),
    ];
    if let Some(secs) = numpy {
        rows.push(("numpy + netCDF4 script, same output and compression", secs));
    }
    println!(
        "| run | wall s | steps/s | file MB/s | decoded MB/s | ÷ read alone | ÷ read and write |"
    );
    println!("|---|---|---|---|---|---|---|");
    for (name, secs) in rows {
        println!(
            "| {name} | {secs:.2} | {:.2} | {:.1} | {:.1} | {:.2} | {:.2} |",
            steps as f64 / secs,
            file_mb / secs,
            decoded_mb / secs,
            secs / read,
            secs / read_write
        );
    }
    if let Some(secs) = numpy {
        println!("shearbox compute is {:.1} x faster than the numpy script", secs / compute);
    }
    println!(
        "output: {out_mb:.1} MB (NetCDF-4, deflate 1 + shuffle); peak memory of a run: {peak_mib:.0} MiB"
    );
    let json = format!(
        "{{\"steps\":{steps},\"file_mb\":{file_mb},\"decoded_mb\":{decoded_mb},\"output_mb\":{out_mb},\
         \"threads\":{threads},\"peak_mib\":{peak_mib},\"read_s\":{read},\"read_write_s\":{read_write},\"read_write_library_s\":{read_write_library},\"numpy_s\":{},\"compute_uncompressed_s\":{plain},\"compute_s\":{compute},\"ratio_to_read\":{},\"ratio_to_read_write\":{}}}\n",
        numpy.map_or("null".to_string(), |x| x.to_string()),
        compute / read,
        compute / read_write
    );
    std::fs::write(out_dir.join("compute.json"), json).unwrap();
    let _ = std::fs::remove_file(&out);
}
