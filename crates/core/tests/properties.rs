//! Properties that follow from the numerical contract itself: a sub-box with a one-cell halo
//! gives the whole grid's numbers, serial and parallel runs agree bit for bit, reused output
//! arrays give the same bits as fresh ones, and the hemisphere rules of the thermal wind hold.

mod common;

use ndarray::Array2;
use shearbox_core::{
    BBox, Config, Diagnostics, Fields, FieldsBuilder, Grid, LayerDiagnostics, Levels, Parallelism,
    box_profile, compute, compute_baseline, compute_into, compute_with,
};

/// A smooth, hydrostatically built atmosphere with every optional field, on `grid`.
fn atmosphere(grid: Grid) -> Fields {
    let levels = common::levels_hpa(&[1000.0, 925.0, 850.0, 700.0, 500.0, 300.0]);
    let t = common::field3(&grid, &levels, |p, lat, lon| {
        288.0
            - 55.0 * (1.0 - (p / 1e5).powf(0.19))
            - 10.0 * ((lat.abs() - 45.0 - 5.0 * (lon.to_radians() * 3.0).sin()) / 7.0).tanh()
    });
    let q = common::field3(&grid, &levels, |p, lat, _| {
        0.012 * (p / 1e5).powi(3) * (lat.to_radians().cos())
    });
    let (lat, lon) = (grid.lat().to_vec(), grid.lon().to_vec());
    // Heights integrated from the virtual temperature, as the kernel's layer means use it.
    let tv = &t * &q.mapv(|q| 1.0 + 0.608 * q);
    let z = common::hydrostatic_z(&levels, &tv, |j, i| {
        120.0 * (lat[j].to_radians() * 2.0).sin() * (lon[i].to_radians() * 2.0).cos()
    });
    let u = common::field3(&grid, &levels, |p, lat, lon| {
        30.0 * (1.0 - p / 1.1e5) * lat.to_radians().cos() + lon.to_radians().sin()
    });
    let v = common::field3(&grid, &levels, |_, lat, lon| {
        5.0 * (lon.to_radians() * 2.0).cos() * lat.to_radians().sin()
    });
    let ps = Array2::from_shape_fn((grid.n_lat(), grid.n_lon()), |(j, i)| {
        // A plateau where the bottom layers are below ground.
        if (lat[j] - 40.0).abs() < 6.0 && (lon[i].rem_euclid(360.0) - 200.0).abs() < 10.0 {
            88_000.0
        } else {
            101_000.0
        }
    });
    let mut t_missing = t.clone();
    t_missing[[2, grid.n_lat() / 3, grid.n_lon() / 2]] = f32::NAN;
    FieldsBuilder::new(grid, levels)
        .geopotential_height(z)
        .temperature(t_missing)
        .specific_humidity(q)
        .wind(u, v)
        .surface_pressure(ps)
        .build()
        .unwrap()
}

fn all_layers(levels: &Levels) -> Vec<shearbox_core::Layer> {
    let mut layers = levels.adjacent_layers();
    layers.push(levels.layer(1000.0, 500.0).unwrap());
    layers
}

/// Every array of a layer, by name, for comparisons.
fn arrays(l: &LayerDiagnostics) -> Vec<(&'static str, &Array2<f32>)> {
    let mut v = vec![
        ("thickness", &l.thickness),
        ("mean_temperature", &l.mean_temperature),
        ("thermal_wind_u", &l.thermal_wind_u),
        ("thermal_wind_v", &l.thermal_wind_v),
        ("temperature_gradient", &l.temperature_gradient),
        ("baroclinic_torque", &l.baroclinic_torque),
        ("rotational_torque", &l.rotational_torque),
    ];
    let opts = [
        ("thickness_from_temperature", &l.thickness_from_temperature),
        ("balance_ratio", &l.balance_ratio),
        ("thermal_advection", &l.thermal_advection),
        ("turning", &l.turning),
        ("n_squared", &l.n_squared),
        ("eady_growth_rate", &l.eady_growth_rate),
    ];
    for (name, a) in opts {
        v.push((name, a.as_ref().expect("every input is present")));
    }
    for (name, a) in
        [("observed_shear", &l.observed_shear), ("ageostrophic_shear", &l.ageostrophic_shear)]
    {
        let (u, w) = a.as_ref().expect("wind is present");
        v.push((name, u));
        v.push((name, w));
    }
    v
}

/// Checks that every value at the box's cells is bit-identical between the whole grid and
/// the sub-box read with its halo.
fn check_halo(fields: &Fields, bbox: BBox) {
    let grid = fields.grid();
    let layers = all_layers(fields.levels());
    let whole = compute(fields, &layers, &Config::default());
    let sel = grid.select(&bbox).expect("box has cells");
    let halo = sel.with_halo(grid.n_lat());
    let sub_fields = fields.subset(&halo);
    let sub = compute(&sub_fields, &layers, &Config::default());
    let rows: Vec<usize> = halo.rows.clone().collect();
    let cols: Vec<usize> = halo.col_indices().collect();
    let mut compared = 0;
    for (sj, &j) in rows.iter().enumerate() {
        for (si, &i) in cols.iter().enumerate() {
            if !grid.cell_in_box(j, i, &bbox) {
                continue;
            }
            compared += 1;
            for (lw, ls) in whole.layers.iter().zip(&sub.layers) {
                assert_eq!(lw.mask[[j, i]], ls.mask[[sj, si]], "mask at {j},{i}");
                for ((name, a), (_, b)) in arrays(lw).into_iter().zip(arrays(ls)) {
                    let (x, y) = (a[[j, i]], b[[sj, si]]);
                    assert!(
                        x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan()),
                        "{name} {:?} at {j},{i}: {x} vs {y}",
                        lw.layer
                    );
                }
            }
            for (gw, gs) in whole.levels.iter().zip(&sub.levels) {
                assert_eq!(
                    gw.geostrophic_u[[j, i]].to_bits(),
                    gs.geostrophic_u[[sj, si]].to_bits()
                );
                assert_eq!(
                    gw.geostrophic_v[[j, i]].to_bits(),
                    gs.geostrophic_v[[sj, si]].to_bits()
                );
            }
        }
    }
    assert!(compared > 0);
    // And therefore the box profiles are equal too.
    assert_eq!(
        box_profile(fields, &whole, &bbox).unwrap(),
        box_profile(&sub_fields, &sub, &bbox).unwrap()
    );
}

#[test]
fn sub_box_with_halo_equals_whole_grid_on_a_periodic_grid() {
    let fields =
        atmosphere(common::grid(common::span(-90.0, 90.0, 3.0), common::span(0.0, 357.0, 3.0)));
    assert!(fields.grid().is_periodic());
    for bbox in [
        BBox::new(10.0, 30.0, 40.0, 60.0).unwrap(),
        // Across the seam of the 0..357 grid, given in -180..180 and in 0..360 terms.
        BBox::new(-20.0, -50.0, 15.0, -20.0).unwrap(),
        BBox::new(340.0, 20.0, 15.0, 50.0).unwrap(),
        // Across the antimeridian: west > east.
        BBox::new(170.0, 30.0, -170.0, 50.0).unwrap(),
        // Touching the poles, the equatorial band, and the plateau.
        BBox::new(100.0, 75.0, 130.0, 90.0).unwrap(),
        BBox::new(-10.0, -8.0, 10.0, 8.0).unwrap(),
        BBox::new(180.0, 30.0, 220.0, 50.0).unwrap(),
        // A single cell, and the whole globe.
        BBox::new(33.0, 45.0, 33.0, 45.0).unwrap(),
        BBox::new(-180.0, -90.0, 180.0, 90.0).unwrap(),
    ] {
        check_halo(&fields, bbox);
    }
}

#[test]
fn sub_box_with_halo_equals_whole_grid_on_a_regional_grid_across_the_antimeridian() {
    // Longitudes as a file that wraps at the antimeridian delivers them: 150..180, -177.5..-130.
    let lon: Vec<f64> = common::span(150.0, 230.0, 2.5)
        .into_iter()
        .map(|l| if l > 180.0 { l - 360.0 } else { l })
        .collect();
    let fields = atmosphere(common::grid(common::span(10.0, 70.0, 2.5), lon));
    assert!(!fields.grid().is_periodic());
    for bbox in [
        BBox::new(170.0, 30.0, -170.0, 50.0).unwrap(),
        BBox::new(150.0, 10.0, 160.0, 20.0).unwrap(),
        BBox::new(-140.0, 60.0, -130.0, 70.0).unwrap(),
        BBox::new(185.0, 35.0, 205.0, 45.0).unwrap(),
    ] {
        check_halo(&fields, bbox);
    }
}

fn assert_identical(a: &Diagnostics, b: &Diagnostics) {
    for (la, lb) in a.layers.iter().zip(&b.layers) {
        assert_eq!(la.mask, lb.mask);
        for ((name, x), (_, y)) in arrays(la).into_iter().zip(arrays(lb)) {
            let same = x.iter().zip(y.iter()).all(|(p, q)| p.to_bits() == q.to_bits());
            assert!(same, "{name} differs");
        }
    }
    for (la, lb) in a.levels.iter().zip(&b.levels) {
        assert!(
            la.geostrophic_u
                .iter()
                .zip(lb.geostrophic_u.iter())
                .all(|(p, q)| p.to_bits() == q.to_bits())
        );
    }
}

/// Every array of a layer, by name, present or not.
fn all_arrays(l: &LayerDiagnostics) -> Vec<(&'static str, Option<&Array2<f32>>)> {
    let mut v = vec![
        ("thickness", Some(&l.thickness)),
        ("mean_temperature", Some(&l.mean_temperature)),
        ("thermal_wind_u", Some(&l.thermal_wind_u)),
        ("thermal_wind_v", Some(&l.thermal_wind_v)),
        ("temperature_gradient", Some(&l.temperature_gradient)),
        ("baroclinic_torque", Some(&l.baroclinic_torque)),
        ("rotational_torque", Some(&l.rotational_torque)),
        ("thickness_from_temperature", l.thickness_from_temperature.as_ref()),
        ("balance_ratio", l.balance_ratio.as_ref()),
        ("thermal_advection", l.thermal_advection.as_ref()),
        ("turning", l.turning.as_ref()),
        ("n_squared", l.n_squared.as_ref()),
        ("eady_growth_rate", l.eady_growth_rate.as_ref()),
    ];
    for (names, p) in [
        (["observed_shear_u", "observed_shear_v"], &l.observed_shear),
        (["ageostrophic_shear_u", "ageostrophic_shear_v"], &l.ageostrophic_shear),
    ] {
        let (u, w) = p.as_ref().map(|(u, w)| (u, w)).unzip();
        v.push((names[0], u));
        v.push((names[1], w));
    }
    v
}

/// The same layers and levels, the same optional outputs, the same bits everywhere.
fn assert_same_everywhere(got: &Diagnostics, want: &Diagnostics) {
    let same = |a: &Array2<f32>, b: &Array2<f32>| {
        a.dim() == b.dim() && a.iter().zip(b.iter()).all(|(p, q)| p.to_bits() == q.to_bits())
    };
    assert_eq!(got.levels.len(), want.levels.len());
    for (k, (g, w)) in got.levels.iter().zip(&want.levels).enumerate() {
        assert!(same(&g.geostrophic_u, &w.geostrophic_u), "geostrophic u at level {k}");
        assert!(same(&g.geostrophic_v, &w.geostrophic_v), "geostrophic v at level {k}");
    }
    assert_eq!(got.layers.len(), want.layers.len());
    for (g, w) in got.layers.iter().zip(&want.layers) {
        assert_eq!(g.layer, w.layer);
        assert_eq!(g.thickness_method, w.thickness_method);
        assert_eq!(g.mean_temperature_kind, w.mean_temperature_kind);
        assert_eq!(g.mask, w.mask, "mask of {:?}", w.layer);
        for ((name, a), (_, b)) in all_arrays(g).into_iter().zip(all_arrays(w)) {
            match (a, b) {
                (Some(a), Some(b)) => assert!(same(a, b), "{name} of {:?}", w.layer),
                (None, None) => {}
                _ => panic!("{name} of {:?}: present in one result only", w.layer),
            }
        }
    }
}

/// Overwrites every value held by `out` with a value the kernel never writes there.
fn poison(out: &mut Diagnostics) {
    for l in &mut out.levels {
        l.geostrophic_u.fill(7.0);
        l.geostrophic_v.fill(7.0);
    }
    for l in &mut out.layers {
        l.mask.fill(99);
        for a in [
            &mut l.thickness,
            &mut l.mean_temperature,
            &mut l.thermal_wind_u,
            &mut l.thermal_wind_v,
            &mut l.temperature_gradient,
            &mut l.baroclinic_torque,
            &mut l.rotational_torque,
        ] {
            a.fill(7.0);
        }
        for a in [
            &mut l.thickness_from_temperature,
            &mut l.balance_ratio,
            &mut l.thermal_advection,
            &mut l.turning,
            &mut l.n_squared,
            &mut l.eady_growth_rate,
        ]
        .into_iter()
        .flatten()
        {
            a.fill(7.0);
        }
        for (u, v) in [&mut l.observed_shear, &mut l.ageostrophic_shear].into_iter().flatten() {
            u.fill(7.0);
            v.fill(7.0);
        }
    }
}

/// `compute_into` writes every value of the arrays it reuses, and replaces those that do not
/// fit: after runs on other grids, other inputs and other layers, with every old value
/// overwritten by a sentinel, its result equals a fresh run's bit for bit.
#[test]
fn reused_outputs_equal_fresh_ones() {
    let global =
        atmosphere(common::grid(common::span(-90.0, 90.0, 3.0), common::span(0.0, 357.0, 3.0)));
    let regional =
        atmosphere(common::grid(common::span(10.0, 70.0, 2.5), common::span(150.0, 200.0, 2.5)));
    // The global grid with geopotential alone: no temperature, humidity, wind or surface.
    let z = global.geopotential_height().unwrap().to_owned();
    let z_only = FieldsBuilder::new(global.grid().clone(), global.levels().clone())
        .geopotential_height(z)
        .build()
        .unwrap();
    let levels = global.levels().clone();
    let deep = vec![levels.layer(850.0, 300.0).unwrap()];
    let cfg = Config::default();
    let mut out = Diagnostics::default();
    for (fields, layers) in [
        (&regional, all_layers(&levels)),
        (&global, all_layers(&levels)),
        (&z_only, levels.adjacent_layers()),
        (&global, deep),
        (&global, all_layers(&levels)),
        (&global, all_layers(&levels)),
    ] {
        poison(&mut out);
        compute_into(&mut out, fields, &layers, &cfg, Parallelism::Rayon);
        let fresh = compute_with(fields, &layers, &cfg, Parallelism::Serial);
        assert_same_everywhere(&out, &fresh);
    }
}

#[test]
fn serial_and_parallel_agree_bit_for_bit() {
    let fields =
        atmosphere(common::grid(common::span(-90.0, 90.0, 2.0), common::span(0.0, 358.0, 2.0)));
    let layers = all_layers(fields.levels());
    let cfg = Config::default();
    let serial = compute_with(&fields, &layers, &cfg, Parallelism::Serial);
    let pool = rayon::ThreadPoolBuilder::new().num_threads(4).build().unwrap();
    let parallel = pool.install(|| compute_with(&fields, &layers, &cfg, Parallelism::Rayon));
    assert_identical(&serial, &parallel);
}

/// The copy of the arithmetic compiled for AVX2 (used where the processor has it) and the
/// baseline copy give the same bits; where the processor lacks AVX2 both runs take the
/// baseline and the check is trivially met.
#[test]
fn instruction_sets_agree_bit_for_bit() {
    let fields =
        atmosphere(common::grid(common::span(-90.0, 90.0, 2.0), common::span(0.0, 358.0, 2.0)));
    let layers = all_layers(fields.levels());
    let cfg = Config::default();
    let detected = compute_with(&fields, &layers, &cfg, Parallelism::Serial);
    let baseline = compute_baseline(&fields, &layers, &cfg, Parallelism::Serial);
    assert_identical(&detected, &baseline);
    for (a, b) in detected.levels.iter().zip(&baseline.levels) {
        let bits = |x: &Array2<f32>| x.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&a.geostrophic_v), bits(&b.geostrophic_v));
    }
}

/// Hemisphere rules (common practice, and they follow from the formulas: the turning
/// s = u_b v_t − v_b u_t equals −(R_d ln(p_b/p_t)/f) A for hydrostatic fields): in the
/// Northern Hemisphere warm advection goes with veering, in the Southern with backing; the
/// thermal wind blows with cold air on its left in the north and on its right in the south.
#[test]
fn hemisphere_rules() {
    let fields =
        atmosphere(common::grid(common::span(-80.0, 80.0, 2.0), common::span(0.0, 358.0, 2.0)));
    let levels = fields.levels().clone();
    let diag = compute(&fields, &levels.adjacent_layers(), &Config::default());
    let grid = fields.grid();
    let (mut north, mut south) = (0, 0);
    for l in &diag.layers {
        let adv = l.thermal_advection.as_ref().unwrap();
        let turn = l.turning.as_ref().unwrap();
        let log_ratio = (levels.pa()[l.layer.bottom] / levels.pa()[l.layer.top]).ln();
        for ((j, i), &a) in adv.indexed_iter() {
            let s = turn[[j, i]];
            if !(a.is_finite() && s.is_finite()) || a.abs() < 1e-6 {
                continue;
            }
            let lat = grid.lat()[j];
            let f = Config::default().constants.coriolis(lat);
            if lat > 0.0 {
                assert_eq!(a > 0.0, s < 0.0, "NH: warm advection {a} must veer (s = {s})");
                north += 1;
            } else {
                assert_eq!(a > 0.0, s > 0.0, "SH: warm advection {a} must back (s = {s})");
                south += 1;
            }
            // The identity itself, to the accuracy of f32 storage.
            let expected = -(287.05 * log_ratio / f) * f64::from(a);
            assert!(
                (f64::from(s) - expected).abs() < 2e-2 * expected.abs() + 1e-3,
                "s {s} vs {expected}"
            );
        }
    }
    assert!(north > 1000 && south > 1000, "{north} NH and {south} SH cells checked");
}

#[test]
fn thermal_wind_keeps_cold_air_on_its_left_in_the_north() {
    // Temperature falling poleward in both hemispheres (cold at the poles).
    let grid = common::grid(common::span(-70.0, 70.0, 2.0), common::span(0.0, 40.0, 2.0));
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    let t = common::field3(&grid, &levels, |_, lat, lon| 290.0 - 0.4 * lat.abs() + 0.05 * lon);
    let fields = FieldsBuilder::new(grid.clone(), levels.clone()).temperature(t).build().unwrap();
    let diag = compute(&fields, &levels.adjacent_layers(), &Config::default());
    let l = &diag.layers[0];
    for j in 1..grid.n_lat() - 1 {
        let lat = grid.lat()[j];
        if lat.abs() < 10.0 {
            continue;
        }
        let (u, v) = (f64::from(l.thermal_wind_u[[j, 10]]), f64::from(l.thermal_wind_v[[j, 10]]));
        // Direction of the cold side: −∇T = (−∂T/∂x, −∂T/∂y) with ∂T/∂x > 0 and
        // ∂T/∂y = −0.4 sign(lat) per degree.
        let cold = (-0.05 / lat.to_radians().cos(), 0.4 * lat.signum());
        // k × V_T = (−v, u) points to the left of V_T.
        let left = -v * cold.0 + u * cold.1;
        if lat > 0.0 {
            assert!(left > 0.0, "lat {lat}: cold air not on the left of ({u}, {v})");
        } else {
            assert!(left < 0.0, "lat {lat}: cold air not on the right of ({u}, {v})");
        }
    }
}

#[test]
fn a_box_is_the_same_whatever_representation_its_longitudes_use() {
    // GeoJSON bbox order (RFC 7946 §5): west to east, crossing the antimeridian when west >
    // east. Any of the longitudes' representations modulo 360 names the same box; the case
    // 170, −340 was found by the fuzzer (fuzz/regressions) with a negative width.
    let grid = common::grid(common::span(-10.0, 10.0, 2.0), common::span(0.0, 358.0, 2.0));
    let reference = BBox::new(170.0, -10.0, 20.0, 10.0).unwrap();
    for (west, east) in [(170.0, -340.0), (-190.0, 20.0), (170.0, 380.0 - 360.0), (-190.0, -340.0)]
    {
        let b = BBox::new(west, -10.0, east, 10.0).unwrap();
        assert_eq!(b.width(), 210.0, "{west}, {east}");
        for i in 0..grid.n_lon() {
            assert_eq!(
                grid.cell_in_box(5, i, &b),
                grid.cell_in_box(5, i, &reference),
                "{west}, {east}: column {i}"
            );
        }
    }
    assert_eq!(BBox::new(10.0, 0.0, 10.0, 1.0).unwrap().width(), 0.0);
    assert_eq!(BBox::new(-180.0, 0.0, 180.0, 1.0).unwrap().width(), 360.0);
    assert_eq!(BBox::new(170.0, 0.0, -170.0, 1.0).unwrap().width(), 20.0);
}
