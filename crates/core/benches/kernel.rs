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
//! written in the same way.

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
        let (cold, diag) =
            best_of(1, || pool.install(|| compute_with(&fields, &layers, &cfg, par)));
        let mut diag = diag;
        let (secs, ()) =
            best_of(3, || pool.install(|| compute_into(&mut diag, &fields, &layers, &cfg, par)));
        eprintln!("{label}: fresh outputs {cold:.3} s, reused {secs:.3} s");
        let bytes = input_bytes + output_bytes(&diag);
        drop(diag);
        let copy = copy_bandwidth(64 << 20, n_threads);
        let kernel_bw = bytes as f64 / secs;
        rows.push((label, n_threads, secs, cells / secs, kernel_bw, copy));
    }
    println!(
        "kernel: {n_lat} x {n_lon} grid, {n_levels} levels, {} layers ({:.1} M grid points)",
        layers.len(),
        cells / 1e6
    );
    println!(
        "{:<12} {:>8} {:>14} {:>14} {:>14} {:>9}",
        "threads", "time s", "Mpoints/s", "kernel GB/s", "copy GB/s", "ratio"
    );
    let mut json = Vec::new();
    for (label, n, secs, pps, kbw, copy) in &rows {
        println!(
            "{label:<12} {secs:>8.3} {:>14.1} {:>14.2} {:>14.2} {:>8.0}%",
            pps / 1e6,
            kbw / 1e9,
            copy / 1e9,
            100.0 * kbw / copy
        );
        json.push(format!(
            "{{\"threads\":{n},\"seconds\":{secs},\"grid_points_per_s\":{pps},\"kernel_bytes_per_s\":{kbw},\"copy_bytes_per_s\":{copy},\"ratio\":{}}}",
            kbw / copy
        ));
    }
    let dir = std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("../../target/bench");
    std::fs::create_dir_all(&dir).unwrap();
    let doc = format!(
        "{{\"benchmark\":\"kernel\",\"n_lat\":{n_lat},\"n_lon\":{n_lon},\"levels\":{n_levels},\"runs\":[{}]}}\n",
        json.join(",")
    );
    std::fs::write(dir.join("kernel.json"), doc).unwrap();
}
