//! Masks with counted reasons (physics.md, "What is undefined") and box means (physics.md,
//! "Box means").

mod common;

use ndarray::Array2;
use shearbox_core::{
    BBox, Config, CoreError, FieldsBuilder, MaskReason, Turning, Vector, box_profile, compute,
};

fn simple_fields(lat: Vec<f64>, lon: Vec<f64>) -> shearbox_core::FieldsBuilder {
    let grid = common::grid(lat, lon);
    let levels = common::levels_hpa(&[1000.0, 850.0, 500.0]);
    let t = common::field3(&grid, &levels, |p, lat, lon| {
        250.0 + 30.0 * (p / 1e5) - 0.3 * lat + 0.1 * lon
    });
    let z = common::hydrostatic_z(&levels, &t, |_, _| 100.0);
    FieldsBuilder::new(grid, levels).temperature(t).geopotential_height(z)
}

#[test]
fn equatorial_band_and_pole_rows_are_masked_with_their_reasons() {
    let fields = simple_fields(common::span(-90.0, 90.0, 2.5), common::span(0.0, 357.5, 2.5))
        .build()
        .unwrap();
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &Config::default());
    let grid = fields.grid();
    let l = &diag.layers[0];
    for (j, &lat) in grid.lat().iter().enumerate() {
        let reason = MaskReason::from_u8(l.mask[[j, 3]]);
        let expected = if lat.abs() == 90.0 {
            MaskReason::Pole
        } else if lat.abs() < 5.0 {
            MaskReason::Equator
        } else {
            MaskReason::Valid
        };
        assert_eq!(reason, expected, "lat {lat}");
        // Thickness and layer-mean temperature stay defined everywhere.
        assert!(l.thickness[[j, 3]].is_finite() && l.mean_temperature[[j, 3]].is_finite());
        // The gradient and baroclinic torque stay defined in the equatorial band, not at poles.
        assert_eq!(l.temperature_gradient[[j, 3]].is_finite(), lat.abs() != 90.0, "lat {lat}");
        assert_eq!(
            l.thermal_wind_u[[j, 3]].is_finite(),
            expected == MaskReason::Valid,
            "lat {lat}"
        );
        let n2 = l.n_squared.as_ref().unwrap()[[j, 3]];
        assert!(n2.is_finite() && n2 > 0.0, "N² defined at every row, stable profile");
    }
    // 2.5° rows at −2.5, 0, 2.5 lie inside |φ| < 5°; ±5° do not.
    let profile = box_profile(&fields, &diag, &BBox::new(0.0, -90.0, 10.0, 90.0).unwrap()).unwrap();
    let c = profile.layers[0].counts;
    assert_eq!(c.pole, 2 * 5);
    assert_eq!(c.equator, 3 * 5);
    assert_eq!(c.total(), profile.n_cells);
    assert_eq!(c.valid, profile.n_cells - 25);
}

#[test]
fn a_configurable_equatorial_band() {
    let fields = simple_fields(common::span(-20.0, 20.0, 2.0), common::span(0.0, 10.0, 2.0))
        .build()
        .unwrap();
    let cfg = Config { equator_band_deg: 10.0, ..Config::default() };
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &cfg);
    let profile = box_profile(&fields, &diag, &BBox::new(0.0, -20.0, 10.0, 20.0).unwrap()).unwrap();
    // Rows −8..8 (9 rows) × 6 columns.
    assert_eq!(profile.layers[0].counts.equator, 9 * 6);
}

#[test]
fn a_missing_temperature_removes_the_gradient_at_its_neighbours_not_the_thermal_wind() {
    let mut b = simple_fields(common::span(30.0, 60.0, 2.0), common::span(0.0, 30.0, 2.0));
    let grid = common::grid(common::span(30.0, 60.0, 2.0), common::span(0.0, 30.0, 2.0));
    let levels = common::levels_hpa(&[1000.0, 850.0, 500.0]);
    let mut t = common::field3(&grid, &levels, |p, lat, lon| {
        250.0 + 30.0 * (p / 1e5) - 0.3 * lat + 0.1 * lon
    });
    t[[0, 7, 7]] = f32::NAN;
    b = b.temperature(t);
    let fields = b.build().unwrap();
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &Config::default());
    let l = &diag.layers[0];
    assert!(l.mean_temperature[[7, 7]].is_nan());
    for (j, i) in [(6, 7), (8, 7), (7, 6), (7, 8), (7, 7)] {
        assert!(l.temperature_gradient[[j, i]].is_nan(), "gradient at stencil neighbour {j},{i}");
        assert!(
            l.thermal_wind_u[[j, i]].is_finite(),
            "thermal wind from geopotential stays at {j},{i}"
        );
        assert_eq!(MaskReason::from_u8(l.mask[[j, i]]), MaskReason::Valid);
    }
    assert!(l.temperature_gradient[[5, 7]].is_finite());
    // The layer above does not use the missing level.
    assert!(diag.layers[1].temperature_gradient[[7, 7]].is_finite());
}

#[test]
fn missing_geopotential_is_counted_as_missing() {
    let grid = common::grid(common::span(30.0, 60.0, 2.0), common::span(0.0, 30.0, 2.0));
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    let mut z = common::field3(
        &grid,
        &levels,
        |p, lat, _| if p > 7e4 { 100.0 } else { 5600.0 - 3.0 * lat },
    );
    z[[1, 5, 5]] = f32::NAN;
    let fields = FieldsBuilder::new(grid, levels).geopotential_height(z).build().unwrap();
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &Config::default());
    let profile = box_profile(&fields, &diag, &BBox::new(0.0, 30.0, 30.0, 60.0).unwrap()).unwrap();
    // The cell itself and its four stencil neighbours.
    assert_eq!(profile.layers[0].counts.missing, 5);
    assert_eq!(profile.levels[1].valid_cells, profile.n_cells - 5);
    assert_eq!(profile.levels[0].valid_cells, profile.n_cells);
}

#[test]
fn a_wind_is_undefined_as_a_whole_where_one_component_lacks_a_stencil_point() {
    // physics.md: the geostrophic wind is masked where Z is missing at any stencil point
    // used. East and west of a missing height, only v_g's stencil touches it; the vector is
    // still undefined there as a whole, at the level and for the layers that use it.
    let grid = common::grid(common::span(30.0, 60.0, 2.0), common::span(0.0, 30.0, 2.0));
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    let mut z = common::field3(&grid, &levels, |p, lat, lon| {
        if p > 7e4 { 100.0 + lon } else { 5600.0 - 3.0 * lat + 0.5 * lon }
    });
    z[[1, 5, 5]] = f32::NAN;
    let fields = FieldsBuilder::new(grid, levels).geopotential_height(z).build().unwrap();
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &Config::default());
    let (level, layer) = (&diag.levels[1], &diag.layers[0]);
    for (j, i) in [(5, 4), (5, 6), (4, 5), (6, 5), (5, 5)] {
        assert!(level.geostrophic_u[[j, i]].is_nan() && level.geostrophic_v[[j, i]].is_nan());
        assert!(layer.thermal_wind_u[[j, i]].is_nan() && layer.thermal_wind_v[[j, i]].is_nan());
    }
    assert!(level.geostrophic_u[[5, 3]].is_finite() && level.geostrophic_v[[5, 3]].is_finite());
}

#[test]
fn layers_below_the_surface_are_masked_only_where_they_are_below() {
    let grid = common::grid(common::span(30.0, 60.0, 2.0), common::span(0.0, 30.0, 2.0));
    let mut ps = Array2::from_elem((grid.n_lat(), grid.n_lon()), 101_300.0f32);
    ps[[7, 7]] = 90_000.0; // between 925 and 850 hPa
    let fields = simple_fields(grid.lat().to_vec(), grid.lon().to_vec())
        .surface_pressure(ps)
        .build()
        .unwrap();
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &Config::default());
    let (low, high) = (&diag.layers[0], &diag.layers[1]);
    assert_eq!(MaskReason::from_u8(low.mask[[7, 7]]), MaskReason::BelowGround);
    assert!(low.thickness[[7, 7]].is_nan() && low.mean_temperature[[7, 7]].is_nan());
    // Neighbours keep their values: the mask names one cell.
    assert!(low.thermal_wind_u[[6, 7]].is_finite() && low.thickness[[6, 7]].is_finite());
    // 850–500 hPa is above the surface there.
    assert_eq!(MaskReason::from_u8(high.mask[[7, 7]]), MaskReason::Valid);
    // The 1000 hPa geostrophic wind is below ground there too.
    assert!(diag.levels[0].geostrophic_u[[7, 7]].is_nan());
    assert!(diag.levels[1].geostrophic_u[[7, 7]].is_finite());
    let profile = box_profile(&fields, &diag, &BBox::new(0.0, 30.0, 30.0, 60.0).unwrap()).unwrap();
    assert_eq!(profile.layers[0].counts.below_ground, 1);
    assert_eq!(profile.layers[1].counts.below_ground, 0);
}

#[test]
fn surface_height_masks_below_ground_without_surface_pressure() {
    let grid = common::grid(common::span(30.0, 60.0, 2.0), common::span(0.0, 30.0, 2.0));
    let mut zs = Array2::from_elem((grid.n_lat(), grid.n_lon()), 0.0f32);
    zs[[3, 3]] = 1500.0; // above the 850 hPa surface (~1400 m here), below 500 hPa
    let fields =
        simple_fields(grid.lat().to_vec(), grid.lon().to_vec()).surface_height(zs).build().unwrap();
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &Config::default());
    assert_eq!(MaskReason::from_u8(diag.layers[0].mask[[3, 3]]), MaskReason::BelowGround);
    assert_eq!(MaskReason::from_u8(diag.layers[1].mask[[3, 3]]), MaskReason::BelowGround);
    assert_eq!(MaskReason::from_u8(diag.layers[0].mask[[3, 4]]), MaskReason::Valid);
}

#[test]
fn box_mean_is_cos_latitude_weighted_with_edges_included() {
    let grid = common::grid(vec![0.0, 30.0, 60.0], vec![0.0, 10.0, 20.0]);
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    // Temperature equal to the latitude in degrees, so the weighted mean is known exactly.
    let t = common::field3(&grid, &levels, |_, lat, _| 200.0 + lat);
    let fields = FieldsBuilder::new(grid, levels).temperature(t).build().unwrap();
    let diag = compute(&fields, &fields.levels().adjacent_layers(), &Config::default());
    // Edges on cell centres: all nine cells are inside.
    let p = box_profile(&fields, &diag, &BBox::new(0.0, 0.0, 20.0, 60.0).unwrap()).unwrap();
    assert_eq!(p.n_cells, 9);
    let w: Vec<f64> = [0.0f64, 30.0, 60.0].iter().map(|d| d.to_radians().cos()).collect();
    let expected = (w[0] * 200.0 + w[1] * 230.0 + w[2] * 260.0) / (w[0] + w[1] + w[2]);
    let got = p.layers[0].mean_temperature.unwrap();
    assert!((got - expected).abs() < 1e-4, "{got} vs {expected}");
    assert!((p.levels[0].temperature.unwrap() - expected).abs() < 1e-4);
    // Geostrophic wind needs geopotential: absent, not zero.
    assert!(p.levels[0].geostrophic_wind.is_none());
    assert!(p.layers[0].turning.is_none());
    assert!(p.layers[0].thermal_advection.is_none());
}

#[test]
fn boxes_across_the_antimeridian_and_empty_boxes() {
    let lon = common::span(0.0, 350.0, 10.0);
    let grid = common::grid(vec![40.0, 50.0], lon);
    let b = BBox::new(170.0, 40.0, -170.0, 50.0).unwrap();
    let sel = grid.select(&b).unwrap();
    let cols: Vec<usize> = sel.col_indices().collect();
    assert_eq!(cols, vec![17, 18, 19]);
    let halo = sel.with_halo(grid.n_lat());
    assert_eq!(halo.col_indices().collect::<Vec<_>>(), vec![16, 17, 18, 19, 20]);
    let seam = grid.select(&BBox::new(-15.0, 40.0, 15.0, 50.0).unwrap()).unwrap();
    assert_eq!(seam.col_indices().collect::<Vec<_>>(), vec![35, 0, 1]);
    assert_eq!(seam.col_ranges(), vec![35..36, 0..2]);
    assert!(grid.select(&BBox::new(1.0, 40.0, 9.0, 50.0).unwrap()).is_none());
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    let t = common::field3(&grid, &levels, |_, _, _| 250.0);
    let fields = FieldsBuilder::new(grid, levels).temperature(t).build().unwrap();
    let diag = compute(&fields, &[], &Config::default());
    let err = box_profile(&fields, &diag, &BBox::new(1.0, 40.0, 9.0, 50.0).unwrap()).unwrap_err();
    assert!(matches!(err, CoreError::EmptyBox { .. }), "{err}");
}

#[test]
fn malformed_boxes_are_rejected_with_the_reason() {
    for (text, needle) in [
        ("1,2,3", "four"),
        ("a,0,1,1", "not a number"),
        ("0,50,10,40", "south"),
        ("0,-95,10,40", "latitudes"),
        ("0,0,10,NaN", "finite"),
        ("-400,0,10,10", "longitudes"),
    ] {
        let err = BBox::parse(text).unwrap_err().to_string();
        assert!(err.contains(needle), "{text}: {err}");
    }
    assert!(BBox::parse(" -10, 40 ,5,55").is_ok());
}

#[test]
fn wind_direction_follows_the_meteorological_convention() {
    // A wind from the north blows southward; from the west, eastward (WMO convention).
    let cases = [
        ((0.0, -5.0), 0.0),
        ((5.0, 0.0), 270.0),
        ((0.0, 5.0), 180.0),
        ((-5.0, 0.0), 90.0),
        ((-3.0, -3.0), 45.0),
    ];
    for ((u, v), dir) in cases {
        let got = Vector { u, v }.direction_deg();
        assert!((got - dir).abs() < 1e-9, "({u},{v}): {got}");
    }
    // A southerly at the bottom turning to a westerly at the top is clockwise: veering.
    assert_eq!(
        Turning::between(Vector { u: 0.0, v: 5.0 }, Vector { u: 5.0, v: 0.0 }),
        Turning::Veering
    );
    assert_eq!(
        Turning::between(Vector { u: 5.0, v: 0.0 }, Vector { u: 0.0, v: 5.0 }),
        Turning::Backing
    );
}

#[test]
fn a_step_counts_the_values_of_every_field_it_holds() {
    let grid = common::grid(common::span(30.0, 40.0, 2.0), common::span(0.0, 10.0, 2.0));
    let levels = common::levels_hpa(&[1000.0, 500.0]);
    let z = common::field3(&grid, &levels, |p, _, _| if p > 7e4 { 100.0 } else { 5600.0 });
    let (n_lat, n_lon) = (grid.n_lat(), grid.n_lon());
    let ps = Array2::from_elem((n_lat, n_lon), 101_300.0f32);
    let fields = FieldsBuilder::new(grid, levels)
        .geopotential_height(z.clone())
        .wind(z.clone(), z)
        .surface_pressure(ps)
        .build()
        .unwrap();
    // Three volumes (z, u, v) of 2 levels and one surface field.
    assert_eq!(fields.n_values(), 3 * 2 * n_lat * n_lon + n_lat * n_lon);
}
