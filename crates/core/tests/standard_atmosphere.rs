//! Hypsometric thickness against the U.S. Standard Atmosphere 1976 (NOAA-S/T 76-1562).
//!
//! The 1976 standard atmosphere defines temperature as piecewise linear in geopotential height
//! H: 288.15 K at H = 0 falling at 6.5 K/km to 216.65 K at 11 km, isothermal to 20 km, then
//! rising at 1 K/km to 32 km, with p = 101 325 Pa at H = 0. Its pressure–height relation
//! follows from the hydrostatic equation with g0 = 9.80665 m s⁻² and R = 287.053 J kg⁻¹ K⁻¹.
//! We invert it to get the standard temperature at each pressure, hand only the temperatures to
//! the kernel, and check the kernel's hypsometric thicknesses rebuild the standard heights.

mod common;

use ndarray::Array3;
use shearbox_core::{Config, FieldsBuilder, Levels, compute};

const G0: f64 = 9.80665;
const R_STD: f64 = 287.053;

/// Geopotential height (m) and temperature (K) of the 1976 standard atmosphere at pressure
/// `p` (Pa), for p down to 868 Pa (32 km).
fn ussa1976(p: f64) -> (f64, f64) {
    // (base height m, base temperature K, lapse rate K/m) of the first three layers.
    let layers = [(0.0, 288.15, -0.0065), (11_000.0, 216.65, 0.0), (20_000.0, 216.65, 0.001)];
    let mut p_base = 101_325.0;
    for (n, &(h_base, t_base, lapse)) in layers.iter().enumerate() {
        let h_top = layers.get(n + 1).map_or(32_000.0, |l| l.0);
        let p_top = pressure_at(p_base, t_base, lapse, h_top - h_base);
        if p >= p_top || n == layers.len() - 1 {
            let dh = if lapse == 0.0 {
                R_STD * t_base / G0 * (p_base / p).ln()
            } else {
                t_base / lapse * ((p / p_base).powf(-R_STD * lapse / G0) - 1.0)
            };
            return (h_base + dh, t_base + lapse * dh);
        }
        p_base = p_top;
    }
    unreachable!("the loop returns in its last layer")
}

fn pressure_at(p_base: f64, t_base: f64, lapse: f64, dh: f64) -> f64 {
    if lapse == 0.0 {
        p_base * (-G0 * dh / (R_STD * t_base)).exp()
    } else {
        p_base * (1.0 + lapse * dh / t_base).powf(-G0 / (R_STD * lapse))
    }
}

#[test]
fn closed_form_matches_the_published_table() {
    // Heights as printed in the standard's tables (the issue quotes them; 1000 hPa ≈ 110.9 m and
    // 700 hPa ≈ 3012 m are from memory of the same tables).
    for (hpa, published) in
        [(1000.0, 110.9), (850.0, 1457.3), (700.0, 3012.0), (500.0, 5574.4), (200.0, 11784.0)]
    {
        let (h, _) = ussa1976(hpa * 100.0);
        assert!(
            (h - published).abs() < 1.5,
            "{hpa} hPa: closed form {h:.1} m vs table {published} m"
        );
    }
}

#[test]
fn hypsometric_thickness_rebuilds_standard_heights() {
    // Levels every 5 hPa from 1000 to 100 hPa, so that the trapezoid in ln p is fine enough;
    // the kernel's deep-layer mean temperature integrates over all of them.
    let hpa: Vec<f64> = (0..=180).map(|k| 1000.0 - 5.0 * k as f64).collect();
    let levels = common::levels_hpa(&hpa);
    let grid = common::grid(common::span(40.0, 44.0, 2.0), common::span(0.0, 4.0, 2.0));
    let t =
        Array3::from_shape_fn((levels.len(), 3, 3), |(k, _, _)| ussa1976(levels.pa()[k]).1 as f32);
    let fields = FieldsBuilder::new(grid, levels.clone()).temperature(t).build().unwrap();
    // The kernel's R_d (287.05) is the rounded standard value; use the standard's own here.
    let mut cfg = Config::default();
    cfg.constants.r_dry = R_STD;
    let targets = [850.0, 700.0, 500.0, 300.0, 250.0, 200.0, 100.0];
    let layers: Vec<_> = targets.iter().map(|&top| levels.layer(1000.0, top).unwrap()).collect();
    let diag = compute(&fields, &layers, &cfg);
    let z1000 = ussa1976(100_000.0).0;
    // Published heights where the issue gives them (U.S. Standard Atmosphere 1976 tables),
    // the closed form of the same standard elsewhere.
    let published = |hpa: f64| match hpa {
        850.0 => 1457.3,
        500.0 => 5574.4,
        200.0 => 11784.0,
        _ => ussa1976(hpa * 100.0).0,
    };
    for (l, &top) in diag.layers.iter().zip(&targets) {
        assert!(l.thickness_from_temperature.is_some());
        let thickness = f64::from(l.thickness[[1, 1]]);
        let height = z1000 + thickness;
        let expected = published(top);
        assert!(
            (height - expected).abs() < 1.0,
            "{top} hPa: {height:.2} m from the kernel, {expected} m in the standard"
        );
    }
}

#[test]
fn adjacent_layers_sum_to_the_deep_layer() {
    let levels = Levels::from_pa(vec![100_000.0, 85_000.0, 70_000.0, 50_000.0]).unwrap();
    let grid = common::grid(vec![40.0, 42.0, 44.0], vec![0.0, 2.0, 4.0]);
    let t = common::field3(&grid, &levels, |p, _, _| ussa1976(p).1);
    let fields = FieldsBuilder::new(grid, levels.clone()).temperature(t).build().unwrap();
    let mut layers = levels.adjacent_layers();
    layers.push(levels.layer(1000.0, 500.0).unwrap());
    let diag = compute(&fields, &layers, &Config::default());
    let sum: f64 = diag.layers[..3].iter().map(|l| f64::from(l.thickness[[1, 1]])).sum();
    let deep = f64::from(diag.layers[3].thickness[[1, 1]]);
    // The trapezoid in ln p is additive over sub-layers (definition in physics.md).
    assert!((sum - deep).abs() < 1e-2, "{sum} vs {deep}");
}
