//! Builders shared by the kernel's tests.
#![allow(dead_code)]

use ndarray::Array3;
use shearbox_core::{Config, Grid, Levels};

/// Uniformly spaced values from `start` to `end` inclusive.
pub fn span(start: f64, end: f64, step: f64) -> Vec<f64> {
    let n = ((end - start) / step).round() as usize;
    (0..=n).map(|k| start + k as f64 * step).collect()
}

pub fn grid(lat: Vec<f64>, lon: Vec<f64>) -> Grid {
    Grid::new(lat, lon).expect("test grid is valid")
}

pub fn levels_hpa(hpa: &[f64]) -> Levels {
    Levels::from_pa(hpa.iter().map(|p| p * 100.0).collect()).expect("test levels are valid")
}

/// A 3-D field from a function of (pressure Pa, lat deg, lon deg).
pub fn field3(grid: &Grid, levels: &Levels, f: impl Fn(f64, f64, f64) -> f64) -> Array3<f32> {
    Array3::from_shape_fn((levels.len(), grid.n_lat(), grid.n_lon()), |(k, j, i)| {
        f(levels.pa()[k], grid.lat()[j], grid.lon()[i]) as f32
    })
}

/// Geopotential height built from temperature by the hypsometric equation with the trapezoid
/// in ln p between adjacent levels (the discrete form the kernel uses for adjacent layers),
/// starting from `z_bottom` at the lowest level.
pub fn hydrostatic_z(
    levels: &Levels,
    t: &Array3<f32>,
    z_bottom: impl Fn(usize, usize) -> f64,
) -> Array3<f32> {
    let c = Config::default().constants;
    let (nk, nj, ni) = t.dim();
    let mut z = Array3::<f32>::zeros((nk, nj, ni));
    for j in 0..nj {
        for i in 0..ni {
            let mut height = z_bottom(j, i);
            z[[0, j, i]] = height as f32;
            for k in 1..nk {
                let tmean = 0.5 * (f64::from(t[[k - 1, j, i]]) + f64::from(t[[k, j, i]]));
                height += c.r_dry / c.g0 * tmean * (levels.pa()[k - 1] / levels.pa()[k]).ln();
                z[[k, j, i]] = height as f32;
            }
        }
    }
    z
}
