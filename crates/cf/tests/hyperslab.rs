//! Block reads: `read_fields(t, Some(sel))` must equal `read_fields(t, None)` followed by
//! `Fields::subset(sel)`, bit for bit (NaN included), for boxes with their halo inside the
//! grid, across the antimeridian of a periodic grid, on a regional grid stored split at the
//! antimeridian (so that one block needs two hyperslabs) and on files stored in reverse.

mod common;

use common::*;
use ndarray::{ArrayView2, ArrayView3};
use shearbox_cf::{Dataset, VarOverrides};
use shearbox_core::{BBox, Fields};

fn same3(what: &str, a: Option<ArrayView3<'_, f32>>, b: Option<ArrayView3<'_, f32>>) -> TestResult {
    ensure!(a.is_some() == b.is_some(), "{what}: presence differs");
    if let (Some(a), Some(b)) = (a, b) {
        ensure!(a.shape() == b.shape(), "{what}: shapes {:?} vs {:?}", a.shape(), b.shape());
        ensure!(
            a.iter().zip(b.iter()).all(|(x, y)| x.to_bits() == y.to_bits()),
            "{what}: values differ"
        );
    }
    Ok(())
}

fn same2(what: &str, a: Option<ArrayView2<'_, f32>>, b: Option<ArrayView2<'_, f32>>) -> TestResult {
    ensure!(a.is_some() == b.is_some(), "{what}: presence differs");
    if let (Some(a), Some(b)) = (a, b) {
        ensure!(a.shape() == b.shape(), "{what}: shapes {:?} vs {:?}", a.shape(), b.shape());
        ensure!(
            a.iter().zip(b.iter()).all(|(x, y)| x.to_bits() == y.to_bits()),
            "{what}: values differ"
        );
    }
    Ok(())
}

fn same(a: &Fields, b: &Fields) -> TestResult {
    ensure!(a.grid() == b.grid(), "grids differ: {:?} vs {:?}", a.grid().lon(), b.grid().lon());
    ensure!(a.levels() == b.levels(), "levels differ");
    same3("z", a.geopotential_height(), b.geopotential_height())?;
    same3("t", a.temperature(), b.temperature())?;
    same3("q", a.specific_humidity(), b.specific_humidity())?;
    same3("u", a.wind().map(|w| w.0), b.wind().map(|w| w.0))?;
    same3("v", a.wind().map(|w| w.1), b.wind().map(|w| w.1))?;
    same2("ps", a.surface_pressure(), b.surface_pressure())?;
    same2("zs", a.surface_height(), b.surface_height())
}

/// Reads every box (with its one-cell halo) of every step both ways and compares. Returns
/// how many blocks wrapped around the normalised column order.
fn check_boxes(
    ds: &Dataset,
    boxes: &[(f64, f64, f64, f64)],
) -> Result<usize, Box<dyn std::error::Error>> {
    let mut wrapped = 0;
    for t in 0..ds.n_steps() {
        let full = ds.read_fields(t, None)?;
        for &(w, s, e, n) in boxes {
            let bbox = BBox::new(w, s, e, n)?;
            let sel =
                ds.grid().select(&bbox).ok_or("box holds no cell")?.with_halo(ds.grid().n_lat());
            if sel.col_ranges().len() == 2 {
                wrapped += 1;
            }
            let block = ds.read_fields(t, Some(&sel))?;
            same(&block, &full.subset(&sel))
                .map_err(|e| format!("box {w},{s},{e},{n}, t {t}: {e}"))?;
        }
    }
    Ok(wrapped)
}

/// A file with every field on `lat` × `lon`, 3 levels, 2 times; `z` packed int16 with one
/// fill value, `t` in degC, winds with permuted dimensions.
fn all_fields(lat: &[f64], lon: &[f64]) -> Cdl {
    let axes = Axes {
        lat: lat.to_vec(),
        lon: lon.to_vec(),
        lev: vec![1000.0, 700.0, 300.0],
        lev_units: "hPa".into(),
        time: vec![0.0, 12.0],
    };
    let mut cdl = axes.cdl();
    cdl.dims[0].2 = false;
    let cdl = cdl
        .var(
            Var::new("z", "short", &["time", "level", "lat", "lon"])
                .text("units", "m2 s-2")
                .raw("scale_factor", "0.5")
                .raw("add_offset", "20000.")
                .raw("_FillValue", "-32767s"),
        )
        .var(Var::new("t", "float", &["time", "level", "lat", "lon"]).text("units", "degC"))
        .var(Var::new("q", "double", &["level", "lat", "lon", "time"]).text("units", "kg kg-1"))
        .var(Var::new("u", "float", &["lon", "lat", "level", "time"]).text("units", "m s-1"))
        .var(Var::new("v", "float", &["time", "lon", "level", "lat"]).text("units", "m s-1"))
        .var(Var::new("sp", "float", &["time", "lat", "lon"]).text("units", "Pa"))
        .var(Var::new("zs", "float", &["lat", "lon"]).text("units", "m"));
    let cdl = cdl.fill("z", |i| {
        if i == [1, 2, 3, 4] {
            "_".into()
        } else {
            ((i[1] * 7000 + i[2] * 40 + i[3]) as i64 - 20000).to_string()
        }
    });
    let cdl = fill_pattern(cdl, "t", -60.0);
    let cdl = fill_pattern(cdl, "q", 0.0);
    let cdl = fill_pattern(fill_pattern(cdl, "u", 0.0), "v", -3000.0);
    let cdl = cdl.fill("sp", |i| {
        (95000.0 + 100.0 * i[0] as f64 + 10.0 * i[1] as f64 + i[2] as f64).to_string()
    });
    cdl.fill("zs", |i| (10.0 * i[0] as f64 + 0.5 * i[1] as f64).to_string())
}

#[test]
fn periodic_grid_boxes_inside_and_across_the_antimeridian() -> TestResult {
    let dir = tmp()?;
    let lat: Vec<f64> = (0..13).map(|j| 60.0 - 10.0 * j as f64).collect(); // N->S
    let lon: Vec<f64> = (0..24).map(|i| 15.0 * i as f64).collect(); // 0..345
    let boxes = [
        (20.0, -20.0, 80.0, 30.0),    // inside
        (170.0, -35.0, -160.0, 25.0), // across 180
        (-20.0, 0.0, 20.0, 40.0),     // across 0/360, the file's seam
        (-180.0, -60.0, 180.0, 60.0), // the whole circle
        (330.0, 45.0, 359.0, 60.0),   // at the northern edge
    ];
    for kind in ["nc3", "nc4"] {
        let ds = Dataset::open(
            &all_fields(&lat, &lon).write(dir.path(), "glob", kind)?,
            &VarOverrides::default(),
        )?;
        ensure!(ds.grid().is_periodic(), "periodic");
        let wrapped = check_boxes(&ds, &boxes)?;
        ensure!(wrapped > 0, "a block crossing the seam must wrap");
    }
    // The same circle stored from −180: the seam of the file is now at 180.
    let lon: Vec<f64> = (0..24).map(|i| -180.0 + 15.0 * i as f64).collect();
    let ds = Dataset::open(
        &all_fields(&lat, &lon).write(dir.path(), "glob180", "nc4")?,
        &VarOverrides::default(),
    )?;
    ensure!(check_boxes(&ds, &boxes)? > 0, "wraps");
    // Stored in decreasing longitude.
    let lon: Vec<f64> = (0..24).rev().map(|i| 15.0 * i as f64).collect();
    let ds = Dataset::open(
        &all_fields(&lat, &lon).write(dir.path(), "globdesc", "nc3")?,
        &VarOverrides::default(),
    )?;
    check_boxes(&ds, &boxes)?;
    Ok(())
}

#[test]
fn regional_grid_stored_split_at_the_antimeridian() -> TestResult {
    let dir = tmp()?;
    let lat: Vec<f64> = (0..9).map(|j| -40.0 + 5.0 * j as f64).collect();
    // Window 140..−120 stored in numerical order, so the normalised order (140 first) wraps
    // the file's columns: a block across 180 is one normalised run but two file runs.
    let mut lon: Vec<f64> = (0..9).map(|i| -160.0 + 5.0 * i as f64).collect();
    lon.extend((0..9).map(|i| 140.0 + 5.0 * i as f64));
    let boxes = [
        (170.0, -30.0, -170.0, -10.0), // across 180: two file runs
        (142.0, -35.0, 160.0, -5.0),   // western part only
        (-150.0, -20.0, -125.0, 0.0),  // eastern part only
        (135.0, -45.0, -115.0, 5.0),   // everything
    ];
    for kind in ["nc3", "nc4"] {
        let ds = Dataset::open(
            &all_fields(&lat, &lon).write(dir.path(), "reg", kind)?,
            &VarOverrides::default(),
        )?;
        ensure!(!ds.grid().is_periodic(), "regional");
        ensure!(
            ds.grid().lon()[0] == 140.0 && ds.grid().lon()[17] == -120.0,
            "{:?}",
            ds.grid().lon()
        );
        // A regional grid never wraps in normalised order.
        ensure!(check_boxes(&ds, &boxes)? == 0, "no normalised wrap on a regional grid");
    }
    Ok(())
}

#[test]
fn block_outside_the_grid_is_refused() -> TestResult {
    let dir = tmp()?;
    let lat: Vec<f64> = (0..5).map(|j| 10.0 * j as f64).collect();
    let lon: Vec<f64> = (0..6).map(|i| 10.0 * i as f64).collect();
    let ds = Dataset::open(
        &all_fields(&lat, &lon).write(dir.path(), "small", "nc3")?,
        &VarOverrides::default(),
    )?;
    // A selection of a single row (no halo, at a box holding one latitude) cannot form a grid.
    let sel = ds.grid().select(&BBox::new(5.0, 20.0, 35.0, 20.0)?).ok_or("sel")?;
    ensure!(sel.rows.len() == 1, "one row");
    let err = ds.read_fields(0, Some(&sel));
    ensure!(matches!(err, Err(shearbox_cf::CfError::Selection { .. })), "{err:?}");
    Ok(())
}
