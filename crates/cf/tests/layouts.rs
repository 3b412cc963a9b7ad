//! Normalisation of each file layout: coordinates in either order, longitudes in every
//! convention, packing, units, permuted dimensions and data types.
//!
//! Files are written from CDL with `ncgen` (netCDF-C's reference tool), in the classic
//! (`-k nc3`) and NetCDF-4 (`-k nc4`) formats. Every field holds a distinct value per file
//! index ([`common::pattern`]); the checks find, for each normalised cell, the file index of
//! its latitude, longitude and level by value and compare with the value stored there, so a
//! wrong reordering cannot pass.

mod common;

use common::*;
use ndarray::ArrayView3;
use shearbox_cf::{Dataset, G0, Role, TimeSelector, VarOverrides};

type Res<T> = Result<T, Box<dyn std::error::Error>>;

/// Opens with no overrides.
fn open(p: &std::path::Path) -> Res<Dataset> {
    Ok(Dataset::open(p, &VarOverrides::default())?)
}

/// Checks a normalised 3-D array against the pattern stored at the matching file indices,
/// `expect(raw)` turning the stored value into the expected physical value.
fn check3(
    ds: &Dataset,
    a: ArrayView3<'_, f32>,
    axes: &Axes,
    lev_to_pa: f64,
    t: usize,
    base: f64,
    expect: impl Fn(f64) -> f64,
) -> common::TestResult {
    let grid = ds.grid();
    let file_pa: Vec<f64> = axes.lev.iter().map(|p| p * lev_to_pa).collect();
    ensure!(a.shape() == [ds.levels().len(), grid.n_lat(), grid.n_lon()], "shape {:?}", a.shape());
    for (kn, pa) in ds.levels().pa().iter().enumerate() {
        let k = file_index(&file_pa, *pa)?;
        for (jn, lat) in grid.lat().iter().enumerate() {
            let j = file_index(&axes.lat, *lat)?;
            for (in_, lon) in grid.lon().iter().enumerate() {
                let i = file_index(&axes.lon, *lon)?;
                let want = expect(base + pattern(t, k, j, i)) as f32;
                let got = a[[kn, jn, in_]];
                ensure!(
                    got == want,
                    "cell ({kn},{jn},{in_}) = file ({k},{j},{i}): got {got}, want {want}"
                );
            }
        }
    }
    Ok(())
}

/// A file with geopotential `z` (m2 s-2) and temperature `t` (K) on `axes`.
fn zt_file(axes: &Axes) -> Cdl {
    let cdl = axes
        .cdl()
        .var(Var::new("z", "float", &["time", "level", "lat", "lon"]).text("units", "m2 s-2"))
        .var(Var::new("t", "float", &["time", "level", "lat", "lon"]).text("units", "K"));
    fill_pattern(fill_pattern(cdl, "z", 5000.0), "t", 200.0)
}

fn check_zt(ds: &Dataset, axes: &Axes, lev_to_pa: f64) -> common::TestResult {
    for t in 0..axes.time.len() {
        let f = ds.read_fields(t, None)?;
        let z = f.geopotential_height().ok_or("no z")?;
        // physics.md "Inputs": Z = Φ / g0 with g0 = 9.80665 (CGPM 1901).
        check3(ds, z, axes, lev_to_pa, t, 5000.0, |x| x / 9.80665)?;
        let temp = f.temperature().ok_or("no t")?;
        check3(ds, temp, axes, lev_to_pa, t, 200.0, |x| x)?;
    }
    Ok(())
}

#[test]
fn tidy_layout_in_both_formats() -> common::TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    for (kind, format) in [
        ("nc3", "classic"),
        ("nc6", "64-bit offset"),
        ("nc4", "netCDF-4"),
        ("nc7", "netCDF-4 classic model"),
    ] {
        let p = zt_file(&axes).write(dir.path(), kind, kind)?;
        let ds = open(&p)?;
        // The format names as `ncdump -k` reports them (netCDF-C).
        ensure!(ds.format() == format, "{kind}: format {}", ds.format());
        ensure!(ds.grid().lat() == [-30.0, -15.0, 0.0, 15.0, 30.0], "lat {:?}", ds.grid().lat());
        ensure!(ds.grid().lon() == [0.0, 90.0, 180.0, 270.0], "lon {:?}", ds.grid().lon());
        ensure!(ds.grid().is_periodic(), "4 × 90° covers the circle");
        ensure!(ds.levels().pa() == [100000.0, 85000.0, 50000.0], "levels {:?}", ds.levels().pa());
        ensure!(ds.level_units() == "hPa", "level units");
        ensure!(!ds.latitude_descending(), "latitudes are S->N in the file");
        ensure!(
            ds.times() == ["2026-01-15T00:00:00Z", "2026-01-15T06:00:00Z"],
            "times {:?}",
            ds.times()
        );
        ensure!(ds.time_index(&TimeSelector::Latest)? == 1, "latest is the second step");
        ensure!(ds.time_index(&TimeSelector::parse("2026-01-15T06:00Z")?)? == 1, "06Z");
        ensure!(ds.time_index(&TimeSelector::parse("2026-01-15")?)? == 0, "00Z");
        ensure!(
            ds.has(Role::Geopotential) && ds.has(Role::Temperature) && !ds.has(Role::EastwardWind),
            "roles"
        );
        let z = ds.recognised().iter().find(|r| r.role == Role::Geopotential).ok_or("z")?;
        ensure!(z.variable == "z" && z.units == "m2 s-2" && z.matched_by == "short name", "{z:?}");
        ensure!(z.conversion == "geopotential / 9.80665 -> gpm", "{}", z.conversion);
        check_zt(&ds, &axes, 100.0)?;
    }
    Ok(())
}

#[test]
fn latitudes_north_to_south_and_levels_in_pa_top_first() -> common::TestResult {
    let dir = tmp()?;
    let mut axes = Axes::small();
    axes.lat.reverse();
    axes.lev = vec![50000.0, 85000.0, 100000.0];
    axes.lev_units = "Pa".into();
    for kind in ["nc3", "nc4"] {
        let ds = open(&zt_file(&axes).write(dir.path(), kind, kind)?)?;
        ensure!(ds.latitude_descending(), "file is N->S");
        ensure!(ds.grid().lat() == [-30.0, -15.0, 0.0, 15.0, 30.0], "lat {:?}", ds.grid().lat());
        ensure!(ds.levels().pa() == [100000.0, 85000.0, 50000.0], "levels {:?}", ds.levels().pa());
        check_zt(&ds, &axes, 1.0)?;
    }
    Ok(())
}

#[test]
fn level_unit_spellings() -> common::TestResult {
    let dir = tmp()?;
    for (units, factor) in
        [("hPa", 100.0), ("mbar", 100.0), ("millibar", 100.0), ("millibars", 100.0), ("Pa", 1.0)]
    {
        let mut axes = Axes::small();
        axes.lev_units = units.into();
        axes.lev = axes.lev.iter().map(|p| p * 100.0 / factor).collect();
        let ds = open(&zt_file(&axes).write(dir.path(), "u", "nc3")?)?;
        // 1 hPa = 1 mbar = 100 Pa (SI Brochure, 9th ed., non-SI units accepted for use).
        ensure!(
            ds.levels().pa() == [100000.0, 85000.0, 50000.0],
            "{units}: {:?}",
            ds.levels().pa()
        );
    }
    Ok(())
}

#[test]
fn longitudes_minus180_to_180() -> common::TestResult {
    let dir = tmp()?;
    let mut axes = Axes::small();
    axes.lon = vec![-180.0, -90.0, 0.0, 90.0];
    let ds = open(&zt_file(&axes).write(dir.path(), "m180", "nc4")?)?;
    ensure!(ds.grid().lon() == [-180.0, -90.0, 0.0, 90.0], "values kept: {:?}", ds.grid().lon());
    ensure!(ds.grid().is_periodic(), "periodic");
    check_zt(&ds, &axes, 100.0)
}

#[test]
fn regional_grid_across_the_antimeridian() -> common::TestResult {
    let dir = tmp()?;
    // Stored in increasing-mod-360 order across the antimeridian: kept as it is.
    let mut axes = Axes::small();
    axes.lon = vec![140.0, 160.0, 180.0, -160.0, -140.0, -120.0];
    let ds = open(&zt_file(&axes).write(dir.path(), "am", "nc3")?)?;
    ensure!(
        ds.grid().lon() == [140.0, 160.0, 180.0, -160.0, -140.0, -120.0],
        "{:?}",
        ds.grid().lon()
    );
    ensure!(!ds.grid().is_periodic(), "regional");
    check_zt(&ds, &axes, 100.0)?;

    // The same window stored in numerical order (split at the antimeridian): rotated to
    // start after the largest gap, at 140.
    axes.lon = vec![-160.0, -140.0, -120.0, 140.0, 160.0, 180.0];
    let ds = open(&zt_file(&axes).write(dir.path(), "split", "nc4")?)?;
    ensure!(
        ds.grid().lon() == [140.0, 160.0, 180.0, -160.0, -140.0, -120.0],
        "{:?}",
        ds.grid().lon()
    );
    check_zt(&ds, &axes, 100.0)?;

    // And in decreasing order.
    axes.lon = vec![-120.0, -140.0, -160.0, 180.0, 160.0, 140.0];
    let ds = open(&zt_file(&axes).write(dir.path(), "desc", "nc3")?)?;
    ensure!(
        ds.grid().lon() == [140.0, 160.0, 180.0, -160.0, -140.0, -120.0],
        "{:?}",
        ds.grid().lon()
    );
    check_zt(&ds, &axes, 100.0)
}

#[test]
fn duplicated_cyclic_column_is_dropped() -> common::TestResult {
    let dir = tmp()?;
    let mut axes = Axes::small();
    axes.lon = vec![0.0, 90.0, 180.0, 270.0, 360.0];
    let ds = open(&zt_file(&axes).write(dir.path(), "cyc", "nc4")?)?;
    ensure!(ds.grid().lon() == [0.0, 90.0, 180.0, 270.0], "{:?}", ds.grid().lon());
    ensure!(ds.grid().is_periodic(), "periodic");
    let lon_rec = ds.recognised().iter().find(|r| r.role == Role::Longitude).ok_or("lon")?;
    ensure!(
        lon_rec.conversion.contains("duplicated cyclic column dropped"),
        "{}",
        lon_rec.conversion
    );
    check_zt(&ds, &axes, 100.0)
}

#[test]
fn geopotential_height_units_are_kept() -> common::TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    for units in ["m", "gpm"] {
        let cdl = axes
            .cdl()
            .var(Var::new("hgt", "float", &["time", "level", "lat", "lon"]).text("units", units));
        let ds = open(&fill_pattern(cdl, "hgt", 5000.0).write(dir.path(), "gh", "nc3")?)?;
        let f = ds.read_fields(0, None)?;
        check3(&ds, f.geopotential_height().ok_or("z")?, &axes, 100.0, 0, 5000.0, |x| x)?;
        let rec = ds.recognised().iter().find(|r| r.role == Role::Geopotential).ok_or("z")?;
        ensure!(rec.conversion == "none" && rec.variable == "hgt", "{rec:?}");
    }
    // Geopotential in the "**" spelling (as written by GRIB converters) is divided by g0.
    let cdl = axes.cdl().var(
        Var::new("gp", "double", &["time", "level", "lat", "lon"])
            .text("units", "m**2 s**-2")
            .text("standard_name", "geopotential"),
    );
    let ds = open(&fill_pattern(cdl, "gp", 5000.0).write(dir.path(), "gp", "nc4")?)?;
    let rec = ds.recognised().iter().find(|r| r.role == Role::Geopotential).ok_or("z")?;
    ensure!(rec.matched_by == "standard_name", "{rec:?}");
    let f = ds.read_fields(1, None)?;
    check3(&ds, f.geopotential_height().ok_or("z")?, &axes, 100.0, 1, 5000.0, |x| x / G0)
}

#[test]
fn temperature_in_celsius_and_other_units() -> common::TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let cdl = axes
        .cdl()
        .var(Var::new("ta", "float", &["time", "level", "lat", "lon"]).text("units", "degC"))
        .var(Var::new("q", "float", &["time", "level", "lat", "lon"]).text("units", "g/kg"))
        .var(Var::new("ps", "float", &["time", "lat", "lon"]).text("units", "hPa"))
        .var(
            Var::new("orog", "float", &["lat", "lon"])
                .text("units", "m")
                .text("standard_name", "surface_altitude"),
        );
    let cdl = fill_pattern(fill_pattern(cdl, "ta", -50.0), "q", 0.0);
    let cdl = cdl.fill("ps", |i| (900.0 + i[1] as f64 + 0.5 * i[2] as f64).to_string());
    let cdl = cdl.fill("orog", |i| (100.0 * i[0] as f64 + i[1] as f64).to_string());
    let ds = open(&cdl.write(dir.path(), "units", "nc3")?)?;
    let f = ds.read_fields(1, None)?;
    // 0 °C = 273.15 K (SI Brochure, 9th ed., 2.3.1).
    check3(&ds, f.temperature().ok_or("t")?, &axes, 100.0, 1, -50.0, |x| x + 273.15)?;
    check3(&ds, f.specific_humidity().ok_or("q")?, &axes, 100.0, 1, 0.0, |x| x / 1000.0)?;
    let ps = f.surface_pressure().ok_or("ps")?;
    let zs = f.surface_height().ok_or("zs")?;
    for (jn, lat) in ds.grid().lat().iter().enumerate() {
        let j = file_index(&axes.lat, *lat)?;
        for (i_n, lon) in ds.grid().lon().iter().enumerate() {
            let i = file_index(&axes.lon, *lon)?;
            let want = ((900.0 + j as f64 + 0.5 * i as f64) * 100.0) as f32;
            ensure!(ps[[jn, i_n]] == want, "ps {} vs {want}", ps[[jn, i_n]]);
            ensure!(zs[[jn, i_n]] == (100.0 * j as f64 + i as f64) as f32, "zs");
        }
    }
    let conv = |role| ds.recognised().iter().find(|r| r.role == role).map(|r| r.conversion.clone());
    ensure!(
        conv(Role::Temperature).as_deref() == Some("degC + 273.15 -> K"),
        "{:?}",
        conv(Role::Temperature)
    );
    ensure!(
        conv(Role::SurfacePressure).as_deref() == Some("hPa -> Pa"),
        "{:?}",
        conv(Role::SurfacePressure)
    );
    let below =
        ds.diagnostics().into_iter().find(|c| c.name == "below_ground_mask").ok_or("cap")?;
    ensure!(below.possible, "{below:?}");
    let balance = ds.diagnostics().into_iter().find(|c| c.name == "balance_ratio").ok_or("cap")?;
    ensure!(!balance.possible && balance.reason.contains("--var geopotential=NAME"), "{balance:?}");
    Ok(())
}

#[test]
fn permuted_dimensions_extra_singleton_and_no_time_dimension() -> common::TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let mut cdl = axes.cdl();
    // Only the first dimension may be unlimited; here time is a fixed dimension.
    cdl.dims[0].2 = false;
    let cdl = cdl
        .dim("member", 1)
        .var(
            Var::new("geo", "float", &["lon", "lat", "level", "time"])
                .text("standard_name", "geopotential")
                .text("units", "m2 s-2"),
        )
        .var(
            Var::new("air", "double", &["lat", "time", "member", "lon", "level"])
                .text("units", "K"),
        )
        .var(Var::new("uwnd", "float", &["level", "lat", "lon"]).text("units", "m/s"))
        .var(Var::new("vwnd", "float", &["lon", "level", "lat"]).text("units", "m s**-1"));
    let cdl = fill_pattern(fill_pattern(cdl, "geo", 5000.0), "air", 200.0);
    let cdl = fill_pattern(fill_pattern(cdl, "uwnd", 10.0), "vwnd", -10.0);
    for kind in ["nc3", "nc4"] {
        let ds = open(&cdl.write(dir.path(), "perm", kind)?)?;
        for t in 0..2 {
            let f = ds.read_fields(t, None)?;
            check3(&ds, f.geopotential_height().ok_or("z")?, &axes, 100.0, t, 5000.0, |x| x / G0)?;
            check3(&ds, f.temperature().ok_or("t")?, &axes, 100.0, t, 200.0, |x| x)?;
            let (u, v) = f.wind().ok_or("wind")?;
            // The winds have no time dimension: the same at every step (pattern at t = 0).
            check3(&ds, u, &axes, 100.0, 0, 10.0, |x| x)?;
            check3(&ds, v, &axes, 100.0, 0, -10.0, |x| x)?;
        }
    }
    Ok(())
}

/// The packed value of a physical value: round((x − offset) / scale) (CF 1.11 §8.1).
fn pack(x: f64, scale: f64, offset: f64) -> i64 {
    ((x - offset) / scale).round() as i64
}

#[test]
fn packed_int16_with_fill_missing_and_valid_range() -> common::TestResult {
    let dir = tmp()?;
    let mut axes = Axes::small();
    axes.lat.reverse();
    let (scale, offset) = (0.01, 250.0);
    let cdl = axes.cdl().var(
        Var::new("t", "short", &["time", "level", "lat", "lon"])
            .text("units", "K")
            .text("standard_name", "air_temperature")
            .raw("scale_factor", "0.01")
            .raw("add_offset", "250.")
            .raw("_FillValue", "-32767s")
            .raw("missing_value", "-32768s")
            .raw("valid_range", "-30000s, 30000s"),
    );
    // Special cells (file indices t, k, j, i): fill, missing, above valid_max, below
    // valid_min, and the valid extremes.
    let special = |idx: &[usize]| -> Option<&'static str> {
        match (idx[0], idx[1], idx[2], idx[3]) {
            (0, 0, 0, 0) => Some("_"),
            (0, 1, 2, 3) => Some("-32768"),
            (1, 2, 4, 1) => Some("30001"),
            (1, 0, 3, 2) => Some("-30001"),
            (0, 2, 1, 1) => Some("30000"),
            (0, 2, 1, 2) => Some("-30000"),
            _ => None,
        }
    };
    let cdl = cdl.fill("t", |idx| match special(idx) {
        Some(s) => s.to_string(),
        None => {
            pack(200.0 + pattern(idx[0], idx[1], idx[2], idx[3]) / 20.0, scale, offset).to_string()
        }
    });
    for kind in ["nc3", "nc4"] {
        let ds = open(&cdl.write(dir.path(), "packed", kind)?)?;
        let rec = ds.recognised().iter().find(|r| r.role == Role::Temperature).ok_or("t")?;
        ensure!(
            rec.conversion == "unpacked int16: x*scale_factor+add_offset",
            "{}",
            rec.conversion
        );
        for t in 0..2 {
            let f = ds.read_fields(t, None)?;
            let a = f.temperature().ok_or("t")?;
            let grid = ds.grid();
            for kn in 0..3 {
                let k = file_index(&axes.lev, ds.levels().pa()[kn] / 100.0)?;
                for jn in 0..grid.n_lat() {
                    let j = file_index(&axes.lat, grid.lat()[jn])?;
                    for i in 0..grid.n_lon() {
                        let got = a[[kn, jn, i]];
                        let stored = match special(&[t, k, j, i]) {
                            Some("_" | "-32768" | "30001" | "-30001") => {
                                ensure!(
                                    got.is_nan(),
                                    "({t},{k},{j},{i}) should be missing, got {got}"
                                );
                                continue;
                            }
                            Some(s) => s.parse::<f64>()?,
                            None => pack(200.0 + pattern(t, k, j, i) / 20.0, scale, offset) as f64,
                        };
                        let want = (stored * scale + offset) as f32;
                        ensure!(got == want, "({t},{k},{j},{i}): got {got}, want {want}");
                        // And within half a packing step of the value that was packed.
                        if special(&[t, k, j, i]).is_none() {
                            let physical = 200.0 + pattern(t, k, j, i) / 20.0;
                            ensure!(
                                (f64::from(got) - physical).abs() <= 0.5 * scale + 1e-4,
                                "{got} vs {physical}"
                            );
                        }
                    }
                }
            }
        }
    }
    Ok(())
}

#[test]
fn default_fill_value_marks_missing_when_no_fill_attribute() -> common::TestResult {
    // netCDF users' guide, "Fill Values": NC_FILL_FLOAT = 9.9692099683868690e+36 is the
    // default fill of float variables.
    let dir = tmp()?;
    let axes = Axes::small();
    let cdl =
        axes.cdl().var(Var::new("z", "float", &["time", "level", "lat", "lon"]).text("units", "m"));
    let cdl = cdl.fill("z", |idx| {
        if idx == [1, 1, 1, 1] { "9.9692099683868690e+36".into() } else { "5000".into() }
    });
    let ds = open(&cdl.write(dir.path(), "deffill", "nc3")?)?;
    let z = ds.read_fields(1, None)?;
    let z = z.geopotential_height().ok_or("z")?;
    ensure!(z[[1, 1, 1]].is_nan(), "default fill is missing");
    ensure!(z.iter().filter(|x| x.is_nan()).count() == 1, "only one missing");
    Ok(())
}

#[test]
fn integer_and_double_types() -> common::TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    for ty in ["byte", "ubyte", "short", "int", "double"] {
        let kind = if ty == "ubyte" { "nc4" } else { "nc3" };
        let cdl = axes
            .cdl()
            .var(Var::new("z", ty, &["time", "level", "lat", "lon"]).text("units", "gpm"));
        let cdl = cdl.fill("z", |idx| (idx[1] * 30 + idx[2] * 5 + idx[3]).to_string());
        let ds = open(&cdl.write(dir.path(), ty, kind)?)?;
        let f = ds.read_fields(0, None)?;
        let z = f.geopotential_height().ok_or("z")?;
        for (jn, lat) in ds.grid().lat().iter().enumerate() {
            let j = file_index(&axes.lat, *lat)?;
            for i in 0..4 {
                ensure!(z[[2, jn, i]] == (60 + j * 5 + i) as f32, "{ty}: {}", z[[2, jn, i]]);
            }
        }
    }
    Ok(())
}

#[test]
fn overrides_pick_the_named_variables() -> common::TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let cdl = axes
        .cdl()
        .var(Var::new("z", "float", &["time", "level", "lat", "lon"]).text("units", "m"))
        .var(Var::new("zz_other", "float", &["time", "level", "lat", "lon"]).text("units", "m"));
    let cdl = fill_pattern(fill_pattern(cdl, "z", 1000.0), "zz_other", 3000.0);
    let p = cdl.write(dir.path(), "ovr", "nc4")?;
    let mut o = VarOverrides::default();
    o.parse_arg("geopotential=zz_other")?;
    let ds = Dataset::open(&p, &o)?;
    let rec = ds.recognised().iter().find(|r| r.role == Role::Geopotential).ok_or("z")?;
    ensure!(rec.variable == "zz_other" && rec.matched_by == "--var override", "{rec:?}");
    let f = ds.read_fields(0, None)?;
    check3(&ds, f.geopotential_height().ok_or("z")?, &axes, 100.0, 0, 3000.0, |x| x)
}

#[test]
fn no_time_coordinate_reads_one_step() -> common::TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let cdl = Cdl::default()
        .dim("level", 3)
        .dim("lat", 5)
        .dim("lon", 4)
        .var(Var::new("level", "double", &["level"]).text("units", "hPa").values(&axes.lev))
        .var(Var::new("lat", "double", &["lat"]).text("units", "degrees_north").values(&axes.lat))
        .var(Var::new("lon", "double", &["lon"]).text("units", "degrees_east").values(&axes.lon))
        .var(Var::new("z", "float", &["level", "lat", "lon"]).text("units", "m"));
    let ds = open(&fill_pattern(cdl, "z", 0.0).write(dir.path(), "notime", "nc3")?)?;
    ensure!(ds.times().is_empty() && ds.n_steps() == 1 && ds.time_units().is_none(), "untimed");
    ensure!(ds.time_index(&TimeSelector::Latest)? == 0, "latest");
    let f = ds.read_fields(0, None)?;
    check3(&ds, f.geopotential_height().ok_or("z")?, &axes, 100.0, 0, 0.0, |x| x)
}
