//! Bad files give the specific error variant, with a message that names the file, the
//! variable and what to do; damaged files never panic.

mod common;

use common::*;
use shearbox_cf::{CfError, Dataset, Role, TimeSelector, VarOverrides};

fn open(p: &std::path::Path) -> Result<Dataset, CfError> {
    Dataset::open(p, &VarOverrides::default())
}

/// A valid file on the small axes with `z` and `t`.
fn good(axes: &Axes) -> Cdl {
    let cdl = axes
        .cdl()
        .var(Var::new("z", "float", &["time", "level", "lat", "lon"]).text("units", "m2 s-2"))
        .var(Var::new("t", "float", &["time", "level", "lat", "lon"]).text("units", "K"));
    fill_pattern(fill_pattern(cdl, "z", 5000.0), "t", 200.0)
}

fn without(mut cdl: Cdl, name: &str) -> Cdl {
    cdl.vars.retain(|v| v.name != name);
    cdl
}

#[test]
fn missing_variables() -> TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let p = without(without(good(&axes), "z"), "t").write(dir.path(), "nozt", "nc3")?;
    let err = open(&p).err().ok_or("opened")?;
    ensure!(matches!(err, CfError::NoThicknessInput { .. }), "{err:?}");
    let msg = err.to_string();
    ensure!(
        msg.contains("nozt.nc") && msg.contains("zg") && msg.contains("--var temperature=NAME"),
        "{msg}"
    );

    // No latitude coordinate: the variable is renamed to something unrecognisable and its
    // units dropped.
    let mut cdl = good(&axes);
    for v in cdl.vars.iter_mut().filter(|v| v.name == "lat") {
        v.name = "rowcoord".into();
        v.attrs.clear();
    }
    let p = cdl.write(dir.path(), "nolat", "nc4")?;
    let err = open(&p).err().ok_or("opened")?;
    ensure!(matches!(err, CfError::MissingVariable { role: Role::Latitude, .. }), "{err:?}");
    ensure!(err.to_string().contains("--var latitude=NAME"), "{err}");
    // ... and the override fixes it.
    let mut o = VarOverrides::default();
    o.parse_arg("latitude=rowcoord")?;
    let ds = Dataset::open(&p, &o)?;
    ensure!(ds.grid().n_lat() == 5, "lat via override");

    o.set(Role::Temperature, "nosuch".into());
    let err = Dataset::open(&p, &o).err().ok_or("opened")?;
    ensure!(matches!(&err, CfError::OverrideNotFound { name, .. } if name == "nosuch"), "{err:?}");
    Ok(())
}

#[test]
fn wrong_units() -> TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let mut cdl = good(&axes);
    for v in cdl.vars.iter_mut().filter(|v| v.name == "z") {
        v.attrs = vec![("units".into(), "\"furlongs\"".into())];
    }
    let err = open(&cdl.write(dir.path(), "zunits", "nc3")?).err().ok_or("opened")?;
    ensure!(
        matches!(&err, CfError::WrongUnits { role: Role::Geopotential, found, variable, .. } if found == "furlongs" && variable == "z"),
        "{err:?}"
    );
    ensure!(err.to_string().contains("m2 s-2") && err.to_string().contains("gpm"), "{err}");

    let mut axes_m = Axes::small();
    axes_m.lev_units = "m".into();
    let err = open(&good(&axes_m).write(dir.path(), "levunits", "nc3")?).err().ok_or("opened")?;
    ensure!(matches!(err, CfError::WrongUnits { role: Role::Level, .. }), "{err:?}");

    let mut cdl = good(&axes);
    for v in cdl.vars.iter_mut().filter(|v| v.name == "t") {
        v.attrs = vec![("units".into(), "\"degF\"".into())];
    }
    let err = open(&cdl.write(dir.path(), "tunits", "nc4")?).err().ok_or("opened")?;
    ensure!(matches!(err, CfError::WrongUnits { role: Role::Temperature, .. }), "{err:?}");
    Ok(())
}

#[test]
fn non_monotonic_coordinates() -> TestResult {
    let dir = tmp()?;
    type Edit = fn(&mut Axes);
    let cases: [(Role, Edit, usize); 4] = [
        (Role::Latitude, |a| a.lat = vec![-30.0, -15.0, 15.0, 0.0, 30.0], 3),
        (Role::Longitude, |a| a.lon = vec![0.0, 90.0, 45.0, 270.0], 2),
        (Role::Longitude, |a| a.lon = vec![0.0, 90.0, 90.0, 270.0], 2),
        (Role::Level, |a| a.lev = vec![1000.0, 500.0, 850.0], 2),
    ];
    for (role, edit, index) in cases {
        let mut axes = Axes::small();
        edit(&mut axes);
        let err = open(&good(&axes).write(dir.path(), "mono", "nc3")?).err().ok_or("opened")?;
        ensure!(
            matches!(&err, CfError::NotMonotonic { role: r, index: i, .. } if *r == role && *i == index),
            "{role:?}: {err:?}"
        );
    }
    Ok(())
}

#[test]
fn time_errors() -> TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let mut cdl = good(&axes);
    for v in cdl.vars.iter_mut().filter(|v| v.name == "time") {
        v.attrs.push(("calendar".into(), "\"lunar\"".into()));
    }
    let err = open(&cdl.write(dir.path(), "lunar", "nc3")?).err().ok_or("opened")?;
    ensure!(
        matches!(&err, CfError::UnknownCalendar { calendar, .. } if calendar == "lunar"),
        "{err:?}"
    );
    ensure!(err.to_string().contains("lunar.nc") && err.to_string().contains("360_day"), "{err}");

    let mut cdl = good(&axes);
    for v in cdl.vars.iter_mut().filter(|v| v.name == "time") {
        v.attrs = vec![("units".into(), "\"fortnights since 2000-01-01\"".into())];
    }
    let err = open(&cdl.write(dir.path(), "fortnight", "nc3")?).err().ok_or("opened")?;
    ensure!(matches!(err, CfError::TimeUnits { .. }), "{err:?}");

    let ds = open(&good(&axes).write(dir.path(), "ok", "nc3")?)?;
    let err = ds.time_index(&TimeSelector::parse("2026-01-16T00:00Z")?).err().ok_or("found")?;
    ensure!(
        matches!(&err, CfError::TimeNotFound { first, last, count: 2, .. }
            if first == "2026-01-15T00:00:00Z" && last == "2026-01-15T06:00:00Z"),
        "{err:?}"
    );
    let err = ds.read_fields(2, None).err().ok_or("read")?;
    ensure!(matches!(err, CfError::TimeIndexOutOfRange { index: 2, count: 2, .. }), "{err:?}");

    // An unlimited time dimension with no records.
    let mut empty = Axes::small();
    empty.time.clear();
    let cdl = empty
        .cdl()
        .var(Var::new("z", "float", &["time", "level", "lat", "lon"]).text("units", "m"));
    let ds = open(&cdl.write(dir.path(), "empty", "nc3")?)?;
    ensure!(ds.n_steps() == 0 && ds.times().is_empty(), "no steps");
    ensure!(
        matches!(ds.time_index(&TimeSelector::Latest), Err(CfError::NoTimeSteps { .. })),
        "latest"
    );
    ensure!(matches!(ds.read_fields(0, None), Err(CfError::NoTimeSteps { .. })), "read");
    Ok(())
}

#[test]
fn dimension_mismatch() -> TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    let cdl = axes
        .cdl()
        .dim("member", 2)
        .var(Var::new("t", "float", &["time", "member", "level", "lat", "lon"]).text("units", "K"));
    let cdl = cdl.fill("t", |_| "250".into());
    let err = open(&cdl.write(dir.path(), "ens", "nc4")?).err().ok_or("opened")?;
    ensure!(matches!(&err, CfError::Dimensions { variable, .. } if variable == "t"), "{err:?}");
    ensure!(err.to_string().contains("member"), "{err}");

    // Two-dimensional latitudes (a curvilinear grid) named by override.
    let cdl = axes
        .cdl()
        .var(Var::new("lat2d", "float", &["lat", "lon"]).text("units", "degrees_north"))
        .var(Var::new("t", "float", &["time", "level", "lat", "lon"]).text("units", "K"));
    let cdl = cdl.fill("lat2d", |i| i[0].to_string()).fill("t", |_| "250".into());
    let mut o = VarOverrides::default();
    o.parse_arg("latitude=lat2d")?;
    let err = Dataset::open(&cdl.write(dir.path(), "curv", "nc3")?, &o).err().ok_or("opened")?;
    ensure!(matches!(err, CfError::Dimensions { .. }), "{err:?}");
    Ok(())
}

#[test]
fn bad_arguments() -> TestResult {
    let mut o = VarOverrides::default();
    for bad in ["temperature", "temp=ta", "temperature="] {
        ensure!(matches!(o.parse_arg(bad), Err(CfError::BadOverride { .. })), "{bad}");
    }
    for role in Role::ALL {
        ensure!(Role::from_key(role.key()) == Some(role), "{role:?}");
    }
    ensure!(Role::from_key("pressure").is_none(), "not a key");
    Ok(())
}

#[test]
fn truncated_and_damaged_files_give_errors() -> TestResult {
    let dir = tmp()?;
    let axes = Axes::small();
    for kind in ["nc3", "nc6", "nc4"] {
        let p = good(&axes).write(dir.path(), &format!("whole_{kind}"), kind)?;
        let bytes = std::fs::read(&p)?;
        let n = bytes.len();
        for cut in [0, 3, 8, 40, n / 4, n / 2, 3 * n / 4, n - 8, n - 1] {
            let q = dir.path().join(format!("cut_{kind}_{cut}.nc"));
            std::fs::write(&q, &bytes[..cut])?;
            let outcome = open(&q).and_then(|ds| ds.read_fields(1, None).map(|_| ()));
            let err = outcome
                .err()
                .ok_or_else(|| format!("{kind} cut at {cut} of {n}: read without error"))?;
            ensure!(
                matches!(
                    err,
                    CfError::Open { .. } | CfError::Damaged { .. } | CfError::Read { .. }
                ),
                "{kind} cut {cut}: {err:?}"
            );
            ensure!(err.to_string().contains(&format!("cut_{kind}_{cut}.nc")), "{err}");
        }
    }
    // Classic data cut short is detected from the header (the library itself would read the
    // missing bytes as zeros).
    let p = good(&axes).write(dir.path(), "short", "nc3")?;
    let bytes = std::fs::read(&p)?;
    std::fs::write(&p, &bytes[..bytes.len() - 4])?;
    ensure!(matches!(open(&p), Err(CfError::Damaged { .. })), "classic truncation");

    // Not netCDF at all, and a file that is not there.
    let junk = dir.path().join("junk.nc");
    std::fs::write(&junk, b"this is not a netCDF file at all, just text\n")?;
    ensure!(matches!(open(&junk), Err(CfError::Open { .. })), "junk");
    ensure!(matches!(open(&dir.path().join("absent.nc")), Err(CfError::Io { .. })), "absent");

    // A flipped byte in the middle of a classic header or data region never panics.
    let p = good(&axes).write(dir.path(), "flip", "nc3")?;
    let bytes = std::fs::read(&p)?;
    for pos in (4..bytes.len()).step_by(7) {
        let mut b = bytes.clone();
        b[pos] ^= 0xA5;
        let q = dir.path().join("flipped.nc");
        std::fs::write(&q, &b)?;
        // Any outcome but a panic is acceptable: a flipped data byte is a valid file.
        let _ = open(&q).and_then(|ds| ds.read_fields(0, None).map(|_| ()));
    }
    Ok(())
}
