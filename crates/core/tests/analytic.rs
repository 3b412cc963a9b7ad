//! Analytic cases for the geostrophic and thermal wind on the sphere.

mod common;

use shearbox_core::{Config, FieldsBuilder, Layer, compute};

const OMEGA: f64 = 7.292115e-5;
const A: f64 = 6_371_229.0;
const G0: f64 = 9.80665;
const R_D: f64 = 287.05;

/// Williamson et al. (1992, J. Comput. Phys. 102, 211–224), shallow-water test case 2 with
/// α = 0: g h = g h0 − (aΩu0 + u0²/2) sin²φ balances the zonal flow u = u0 cos φ,
/// u0 = 2πa / 12 days, g h0 = 2.94e4 m² s⁻².
///
/// Why the geostrophic wind is not u0 cos φ: the test case balances the *full* momentum
/// equation, in which the flow's curvature adds the metric term u² tan φ / a to the Coriolis
/// term: (f + u tan φ / a) u = −(g/a) ∂h/∂φ. The geostrophic wind keeps only f:
/// u_g = −(g/(f a)) ∂h/∂φ = (2 sin φ cos φ (aΩu0 + u0²/2)) / (2Ω sin φ a)
///     = u0 cos φ (1 + u0/(2aΩ)),
/// about 4 % faster than the balanced flow for u0 = 38.6 m s⁻¹.
#[test]
fn williamson_case2_geostrophic_wind() {
    let u0 = 2.0 * std::f64::consts::PI * A / (12.0 * 86_400.0);
    let gh0 = 2.94e4;
    let grid = common::grid(common::span(-89.0, 89.0, 1.0), common::span(0.0, 359.0, 1.0));
    assert!(grid.is_periodic());
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    let z = common::field3(&grid, &levels, |_, lat, _| {
        let s = lat.to_radians().sin();
        (gh0 - (A * OMEGA * u0 + 0.5 * u0 * u0) * s * s) / G0
    });
    let fields = FieldsBuilder::new(grid.clone(), levels).geopotential_height(z).build().unwrap();
    let diag = compute(&fields, &[], &Config::default());
    let geo = &diag.levels[0];
    let mut worst: f64 = 0.0;
    for (j, &lat) in grid.lat().iter().enumerate() {
        let cos = lat.to_radians().cos();
        let expected = u0 * cos * (1.0 + u0 / (2.0 * A * OMEGA));
        for i in [0, 90, 359] {
            let u = f64::from(geo.geostrophic_u[[j, i]]);
            let v = f64::from(geo.geostrophic_v[[j, i]]);
            if lat.abs() < 5.0 {
                assert!(u.is_nan(), "equatorial band is masked at {lat}");
                continue;
            }
            if j == 0 || j == grid.n_lat() - 1 {
                // The first and last rows of a latitude range take the one-sided difference
                // (physics.md), first-order accurate: checked only for being finite.
                assert!(u.is_finite());
                continue;
            }
            // Second-order centred differences on a 1° grid: relative error ~ Δφ²/6 ≈ 5e-5,
            // plus f32 rounding of heights (~1e-4 m over 2° of latitude).
            assert!(
                (u - expected).abs() < 2e-3 * expected.abs().max(1.0),
                "lat {lat}: {u} vs {expected}"
            );
            assert!(v.abs() < 1e-3, "lat {lat}: v_g = {v}, expected 0");
            worst = worst.max((u - u0 * cos).abs() / (u0 * cos));
        }
    }
    // The difference from u0 cos φ (the factor u0/(2aΩ) ≈ 0.0416) is resolved.
    assert!(worst > 0.04, "metric-term factor not resolved: {worst}");
}

/// Thermal wind of the zonal profile T̄ = T0 − ΔT sin²φ over a layer (p_b, p_t), temperature
/// method: ΔZ = (R_d/g0) T̄ L with L = ln(p_b/p_t), so
/// u_T = −(g0/(f a)) ∂ΔZ/∂φ = −(R_d L/(2Ω sin φ a)) (−2 ΔT sin φ cos φ) = R_d L ΔT cos φ / (Ω a),
/// v_T = 0. Centred differences are second-order: halving Δφ should quarter the error.
fn zonal_profile_errors(step: f64) -> (f64, f64) {
    let (t0, dt) = (300.0, 40.0);
    let grid = common::grid(common::span(-88.0, 88.0, step), common::span(0.0, 360.0 - step, step));
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    let t = common::field3(&grid, &levels, |_, lat, _| t0 - dt * lat.to_radians().sin().powi(2));
    let fields = FieldsBuilder::new(grid.clone(), levels).temperature(t).build().unwrap();
    let diag = compute(&fields, &[Layer { bottom: 0, top: 1 }], &Config::default());
    let l = &diag.layers[0];
    let log_ratio = 2f64.ln();
    let (mut err_u, mut err_grad) = (0.0f64, 0.0f64);
    for (j, &lat) in grid.lat().iter().enumerate() {
        // Latitudes shared by every resolution of the study.
        if lat.abs() < 16.0 || lat.abs() > 72.0 || (lat / 8.0).fract() != 0.0 {
            continue;
        }
        let phi = lat.to_radians();
        let u_exact = R_D * log_ratio * dt * phi.cos() / (OMEGA * A);
        // |∂T̄/∂y| = 2 ΔT |sin φ cos φ| / a.
        let grad_exact = 2.0 * dt * (phi.sin() * phi.cos()).abs() / A;
        err_u = err_u.max((f64::from(l.thermal_wind_u[[j, 7]]) - u_exact).abs());
        err_grad = err_grad
            .max((f64::from(l.temperature_gradient[[j, 7]]) - grad_exact).abs() / grad_exact);
        assert!(f64::from(l.thermal_wind_v[[j, 7]]).abs() < 1e-3);
    }
    (err_u, err_grad)
}

#[test]
fn zonal_temperature_profile_converges_at_second_order() {
    let errors: Vec<(f64, f64)> =
        [4.0, 2.0, 1.0].iter().map(|&s| zonal_profile_errors(s)).collect();
    for pair in errors.windows(2) {
        let order_u = (pair[0].0 / pair[1].0).log2();
        let order_g = (pair[0].1 / pair[1].1).log2();
        assert!((1.8..2.3).contains(&order_u), "thermal wind order {order_u} ({errors:?})");
        assert!((1.8..2.3).contains(&order_g), "gradient order {order_g} ({errors:?})");
    }
    assert!(errors[2].0 < 0.01, "1° error {} m/s", errors[2].0);
}

/// Worked example from the layer form of the thermal wind equation,
/// u_T = −(R_d/f) ln(p_b/p_t) ∂T̄/∂y: a meridional gradient of −1 K per 100 km at 45° N over
/// 1000–500 hPa gives u_T = 287.05 × ln 2 × 1e-5 / (2Ω sin 45°) ≈ 19.3 m s⁻¹.
#[test]
fn worked_example_one_kelvin_per_100_km() {
    let grid = common::grid(common::span(44.0, 46.0, 0.5), common::span(0.0, 2.0, 0.5));
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    // Linear in distance northward: T̄ = 260 K − 1e-5 K/m × a (φ − 45°).
    let t =
        common::field3(&grid, &levels, |_, lat, _| 260.0 - 1e-5 * A * (lat - 45.0).to_radians());
    let fields = FieldsBuilder::new(grid, levels).temperature(t).build().unwrap();
    let diag = compute(&fields, &[Layer { bottom: 0, top: 1 }], &Config::default());
    let l = &diag.layers[0];
    let (u, v) = (f64::from(l.thermal_wind_u[[2, 2]]), f64::from(l.thermal_wind_v[[2, 2]]));
    assert!((u - 19.3).abs() < 0.05, "u_T = {u}");
    assert!(v.abs() < 1e-3, "v_T = {v}");
    let grad = f64::from(l.temperature_gradient[[2, 2]]);
    assert!((grad - 1e-5).abs() < 1e-9, "|∇T̄| = {grad} K/m");
}

/// Fields built hydrostatically (the geopotential integrated from the temperature with the
/// same trapezoid) balance: C = |f||V_T|/ΔZ equals B = g0|∇T̄|/T̄, so the ratio is 1.
#[test]
fn hydrostatic_fields_have_balance_ratio_one() {
    let grid = common::grid(common::span(20.0, 70.0, 2.5), common::span(-30.0, 30.0, 2.5));
    let levels = common::levels_hpa(&[1000.0, 850.0, 700.0, 500.0, 300.0]);
    let t = common::field3(&grid, &levels, |p, lat, lon| {
        let base = 288.0 - 60.0 * (1.0 - (p / 1e5).powf(0.19));
        base - 12.0 * ((lat - 45.0 - 4.0 * (lon / 15.0).sin()) / 8.0).tanh()
    });
    let lat = grid.lat().to_vec();
    let lon = grid.lon().to_vec();
    let z = common::hydrostatic_z(&levels, &t, |j, i| {
        100.0 + 80.0 * (lat[j] / 10.0).cos() * (lon[i] / 20.0).sin()
    });
    let fields = FieldsBuilder::new(grid, levels.clone())
        .temperature(t)
        .geopotential_height(z)
        .build()
        .unwrap();
    let diag = compute(&fields, &levels.adjacent_layers(), &Config::default());
    let mut checked = 0;
    for l in &diag.layers {
        let ratio = l.balance_ratio.as_ref().expect("both fields present");
        for ((j, i), &r) in ratio.indexed_iter() {
            // Only where the gradient is well above the f32 noise of the thickness difference.
            if r.is_finite() && l.temperature_gradient[[j, i]] > 2e-6 {
                assert!((f64::from(r) - 1.0).abs() < 2e-3, "ratio {r} at {j},{i} in {:?}", l.layer);
                checked += 1;
            }
        }
        // Thickness by the two methods agrees to f32 rounding of heights.
        let both = l.thickness_from_temperature.as_ref().unwrap();
        for (a, b) in l.thickness.iter().zip(both) {
            assert!((a - b).abs() < 2e-3, "{a} vs {b}");
        }
    }
    assert!(checked > 500, "only {checked} cells checked");
}

/// With the geopotential method the thermal wind is the difference of the geostrophic winds
/// at the top and the bottom of the layer (physics.md: same stencil, equal to rounding).
#[test]
fn thermal_wind_is_difference_of_geostrophic_winds() {
    let grid = common::grid(common::span(-60.0, 60.0, 3.0), common::span(100.0, 160.0, 3.0));
    let levels = common::levels_hpa(&[925.0, 500.0]);
    let z = common::field3(&grid, &levels, |p, lat, lon| {
        let k: f64 = if p > 60_000.0 { 1.0 } else { 5.5 };
        k * 1000.0 + 60.0 * k * (lat / 9.0).sin() * (lon / 7.0).cos()
    });
    let fields = FieldsBuilder::new(grid, levels.clone()).geopotential_height(z).build().unwrap();
    let diag = compute(&fields, &levels.adjacent_layers(), &Config::default());
    let l = &diag.layers[0];
    let (b, t) = (&diag.levels[0], &diag.levels[1]);
    let mut n = 0;
    for ((j, i), &ut) in l.thermal_wind_u.indexed_iter() {
        let diff_u = t.geostrophic_u[[j, i]] - b.geostrophic_u[[j, i]];
        let diff_v = t.geostrophic_v[[j, i]] - b.geostrophic_v[[j, i]];
        if ut.is_nan() {
            assert!(diff_u.is_nan());
            continue;
        }
        assert!((ut - diff_u).abs() < 1e-3 * ut.abs().max(1.0));
        assert!((l.thermal_wind_v[[j, i]] - diff_v).abs() < 1e-3 * diff_v.abs().max(1.0));
        n += 1;
    }
    assert!(n > 0);
}
