//! Kernel benchmark: every diagnostic of one time step on a 0.25° global grid with 37
//! levels, made in memory, on one thread and on all threads, against this machine's
//! memory-copy bandwidth measured in the same run (the kernel is memory-bound, so the copy
//! rate is its ceiling).
//!
//! `cargo bench -p shearbox-core --bench kernel` prints a table and writes
//! `target/bench/kernel.json`. `SHEARBOX_BENCH_STEP` (degrees, default 0.25) and
//! `SHEARBOX_BENCH_LEVELS` (default 37) shrink the problem for a quick look.
//!
//! Bytes counted: every input array read once and every output array written once
//! (the smallest traffic any implementation needs); the copy counts its bytes read plus
//! written in the same way. The kernel is timed with reused outputs (`compute_into`, as a run
//! over many steps uses it); the first run, which allocates them, is shown beside it. The
//! store-only rate (ordinary stores, which read each line before writing it, where the copy's
//! large `memcpy` streams past the cache) is shown as well.
//!
//! When the numpy reference's environment exists (`tests/reference/.venv`), the benchmark also
//! times the reference's arithmetic on arrays of the same size (`numpy_arith.py`) and prints
//! how many times faster the kernel is.

use std::time::Instant;

use ndarray::{Array2, Array3};
use rayon::prelude::*;
use shearbox_core::{
    Config, Diagnostics, FieldsBuilder, Grid, Levels, Parallelism, compute_into, compute_with,
};

/// The 37 pressure levels (hPa) of a common reanalysis level set.
const LEVELS_37: [f64; 37] = [
    1000.0, 975.0, 950.0, 925.0, 900.0, 875.0, 850.0, 825.0, 800.0, 775.0, 750.0, 700.0, 650.0,
    600.0, 550.0, 500.0, 450.0, 400.0, 350.0, 300.0, 250.0, 225.0, 200.0, 175.0, 150.0, 125.0,
    100.0, 70.0, 50.0, 30.0, 20.0, 10.0, 7.0, 5.0, 3.0, 2.0, 1.0,
];

fn env_or<T: std::str::FromStr>(name: &str, default: T) -> T {
    std::env::var(name).ok().and_then(|v| v.parse().ok()).unwrap_or(default)
}

fn best_of<R>(runs: usize, mut f: impl FnMut() -> R) -> (f64, R) {
    let mut best = f64::INFINITY;
    let mut last = None;
    for _ in 0..runs {
        let start = Instant::now();
        let r = f();
        best = best.min(start.elapsed().as_secs_f64());
        last = Some(r);
    }
    (best, last.expect("at least one run"))
}

/// Bytes read plus written per second by a plain copy of `len` f32 values.
fn copy_bandwidth(len: usize, threads: usize) -> f64 {
    let src = vec![1.0f32; len];
    let mut dst = vec![0.0f32; len];
    let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
    let chunk = len.div_ceil(threads * 8);
    let (secs, ()) = best_of(5, || {
        pool.install(|| {
            dst.par_chunks_mut(chunk)
                .zip(src.par_chunks(chunk))
                .for_each(|(d, s)| d.copy_from_slice(s))
        })
    });
    std::hint::black_box(&dst);
    (2 * len * 4) as f64 / secs
}

/// Bytes written per second by ordinary stores of `len` f32 values (no copy source: the
/// store-only rate, which pays for reading each line before it is written).
fn write_bandwidth(len: usize, threads: usize) -> f64 {
    let mut dst = vec![0.0f32; len];
    let pool = rayon::ThreadPoolBuilder::new().num_threads(threads).build().unwrap();
    let chunk = len.div_ceil(threads * 8);
    let (secs, ()) = best_of(5, || {
        pool.install(|| {
            dst.par_chunks_mut(chunk).for_each(|d| {
                // Values that differ (no memset) and convert in vector registers (i32 → f32),
                // so that the loop is bound by the stores, not by the conversion.
                for (i, x) in d.iter_mut().enumerate() {
                    *x = (i as i32) as f32;
                }
            })
        })
    });
    std::hint::black_box(&dst);
    (len * 4) as f64 / secs
}

/// One line of the table.
struct Row {
    label: &'static str,
    threads: usize,
    /// Best time with reused outputs.
    secs: f64,
    /// Time of the first run, which allocates its outputs.
    fresh: f64,
    points_per_s: f64,
    kernel: f64,
    copy: f64,
    write: f64,
}

/// Seconds the numpy reference takes for the same step's arithmetic on arrays of the same size
/// (`numpy_arith.py` beside this file), when the reference's virtual environment exists.
fn numpy_seconds(step: f64, n_levels: usize) -> Option<f64> {
    let root = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../..");
    let python = root.join("tests/reference/.venv/bin/python");
    let script = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/numpy_arith.py");
    if !python.exists() || !script.exists() {
        return None;
    }
    eprintln!("timing the numpy reference");
    let out = std::process::Command::new(python)
        .arg(script)
        .args(["--step", &step.to_string(), "--levels", &n_levels.to_string()])
        .output()
        .ok()?;
    if !out.status.success() {
        eprintln!("numpy_arith.py failed: {}", String::from_utf8_lossy(&out.stderr));
        return None;
    }
    let text = String::from_utf8(out.stdout).ok()?;
    let rest = &text[text.find("\"seconds\": ")? + "\"seconds\": ".len()..];
    rest[..rest.find([',', '}'])?].trim().parse().ok()
}

fn output_bytes(diag: &Diagnostics) -> usize {
    let mut bytes = 0;
    for l in &diag.levels {
        bytes += (l.geostrophic_u.len() + l.geostrophic_v.len()) * 4;
    }
    for l in &diag.layers {
        let n = l.thickness.len();
        // Always present: thickness, mean temperature, u_T, v_T, gradient, B, C (f32).
        let mut f32_arrays = 7;
        f32_arrays += [
            &l.thickness_from_temperature,
            &l.balance_ratio,
            &l.thermal_advection,
            &l.turning,
            &l.n_squared,
            &l.eady_growth_rate,
        ]
        .iter()
        .filter(|a| a.is_some())
        .count();
        f32_arrays +=
            2 * [&l.observed_shear, &l.ageostrophic_shear].iter().filter(|a| a.is_some()).count();
        // Plus the one-byte mask.
        bytes += f32_arrays * n * 4 + n;
    }
    bytes
}

fn main() {
    let step: f64 = env_or("SHEARBOX_BENCH_STEP", 0.25);
    let n_levels: usize = env_or("SHEARBOX_BENCH_LEVELS", 37).clamp(2, 37);
    let n_lat = (180.0 / step).round() as usize + 1;
    let n_lon = (360.0 / step).round() as usize;
    let lat: Vec<f64> = (0..n_lat).map(|j| -90.0 + j as f64 * step).collect();
    let lon: Vec<f64> = (0..n_lon).map(|i| i as f64 * step).collect();
    let grid = Grid::new(lat.clone(), lon.clone()).unwrap();
    let levels =
        Levels::from_pa(LEVELS_37[..n_levels].iter().map(|p| p * 100.0).collect()).unwrap();
    let shape = (n_levels, n_lat, n_lon);
    eprintln!("making inputs: {n_lat} x {n_lon} x {n_levels} levels");
    let t = Array3::from_shape_fn(shape, |(k, j, i)| {
        let p = levels.pa()[k];
        (288.0 - 60.0 * (1.0 - (p / 1e5).powf(0.19)) - 15.0 * ((lat[j] - 45.0) / 10.0).tanh()
            + 3.0 * (lon[i].to_radians() * 4.0).sin()) as f32
    });
    let mut z = Array3::<f32>::zeros(shape);
    for k in 0..n_levels {
        for j in 0..n_lat {
            for i in 0..n_lon {
                z[[k, j, i]] = if k == 0 {
                    (100.0 + 50.0 * (lat[j].to_radians() * 3.0).sin() * lon[i].to_radians().cos())
                        as f32
                } else {
                    let tm = 0.5 * f64::from(t[[k - 1, j, i]] + t[[k, j, i]]);
                    z[[k - 1, j, i]]
                        + (287.05 / 9.80665 * tm * (levels.pa()[k - 1] / levels.pa()[k]).ln())
                            as f32
                };
            }
        }
    }
    let u = Array3::from_shape_fn(shape, |(k, j, _)| {
        (10.0 + k as f64 * 0.5 * lat[j].to_radians().cos()) as f32
    });
    let v = Array3::from_shape_fn(shape, |(_, j, i)| {
        (2.0 * (lon[i].to_radians() * 3.0).sin() + lat[j] * 0.01) as f32
    });
    let q = Array3::from_shape_fn(shape, |(k, _, _)| (0.01 * (-(k as f64) / 5.0).exp()) as f32);
    let ps = Array2::from_elem((n_lat, n_lon), 101_000.0f32);
    let input_arrays = 5.0 * n_levels as f64 + 1.0;
    let input_bytes = (input_arrays * (n_lat * n_lon * 4) as f64) as usize;
    let fields = FieldsBuilder::new(grid, levels.clone())
        .geopotential_height(z)
        .temperature(t)
        .specific_humidity(q)
        .wind(u, v)
        .surface_pressure(ps)
        .build()
        .unwrap();
    let layers = levels.adjacent_layers();
    let cfg = Config::default();
    let threads = rayon::current_num_threads();
    let cells = (n_lat * n_lon * n_levels) as f64;

    let mut rows = Vec::new();
    for (label, n_threads) in [("1 thread", 1), ("all threads", threads)] {
        let pool = rayon::ThreadPoolBuilder::new().num_threads(n_threads).build().unwrap();
        let par = if n_threads == 1 { Parallelism::Serial } else { Parallelism::Rayon };
        // The first run allocates its outputs (a page fault per 4 KiB on first touch); the
        // timed runs reuse them, as a run over many time steps does.
        let (fresh, mut diag) =
            best_of(1, || pool.install(|| compute_with(&fields, &layers, &cfg, par)));
        let (secs, ()) =
            best_of(3, || pool.install(|| compute_into(&mut diag, &fields, &layers, &cfg, par)));
        let bytes = input_bytes + output_bytes(&diag);
        drop(diag);
        let copy = copy_bandwidth(64 << 20, n_threads);
        let write = write_bandwidth(64 << 20, n_threads);
        rows.push(Row {
            label,
            threads: n_threads,
            secs,
            fresh,
            points_per_s: cells / secs,
            kernel: bytes as f64 / secs,
            copy,
            write,
        });
    }
    println!(
        "kernel: {n_lat} x {n_lon} grid, {n_levels} levels, {} layers ({:.1} M grid points)",
        layers.len(),
        cells / 1e6
    );
    println!(
        "{:<12} {:>8} {:>10} {:>10} {:>12} {:>10} {:>10} {:>7}",
        "threads",
        "time s",
        "fresh s",
        "Mpoints/s",
        "kernel GB/s",
        "copy GB/s",
        "write GB/s",
        "ratio"
    );
    let mut json = Vec::new();
    for r in &rows {
        println!(
            "{:<12} {:>8.3} {:>10.3} {:>10.1} {:>12.2} {:>10.2} {:>10.2} {:>6.0}%",
            r.label,
            r.secs,
            r.fresh,
            r.points_per_s / 1e6,
            r.kernel / 1e9,
            r.copy / 1e9,
            r.write / 1e9,
            100.0 * r.kernel / r.copy
        );
        json.push(format!(
            "{{\"threads\":{},\"seconds\":{},\"fresh_outputs_seconds\":{},\"grid_points_per_s\":{},\"kernel_bytes_per_s\":{},\"copy_bytes_per_s\":{},\"write_bytes_per_s\":{},\"ratio\":{}}}",
            r.threads,
            r.secs,
            r.fresh,
            r.points_per_s,
            r.kernel,
            r.copy,
            r.write,
            r.kernel / r.copy
        ));
    }
    let numpy = numpy_seconds(step, n_levels);
    match numpy {
        Some(np_secs) => println!(
            "numpy reference, arithmetic only: {np_secs:.2} s; kernel {:.1}x faster on 1 thread, \
             {:.1}x on all threads",
            np_secs / rows[0].secs,
            np_secs / rows[1].secs
        ),
        None => println!("numpy reference: not timed (no tests/reference/.venv)"),
    }
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../target/bench");
    std::fs::create_dir_all(&dir).unwrap();
    let numpy = numpy.map_or("null".to_string(), |s| s.to_string());
    let doc = format!(
        "{{\"benchmark\":\"kernel\",\"n_lat\":{n_lat},\"n_lon\":{n_lon},\"levels\":{n_levels},\"numpy_seconds\":{numpy},\"runs\":[{}]}}\n",
        json.join(",")
    );
    std::fs::write(dir.join("kernel.json"), doc).unwrap();
}
