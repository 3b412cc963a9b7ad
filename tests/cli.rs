//! End-to-end tests of the `shearbox` binary on the committed fixtures.
//!
//! The expected grids, levels and times of each fixture come from two places outside the
//! reader: the fixture catalogue (fixtures/README.md, what the generator was asked to write)
//! and netCDF-C's own `ncdump`, which prints the coordinate values as stored.

use std::path::Path;
use std::process::Command;

use serde_json::Value;

mod common;

use common::{fixture, shearbox};

fn ok_json(args: &[&str]) -> Value {
    let out = shearbox(args);
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).expect("valid JSON")
}

/// The numbers `ncdump -v VAR` prints for a coordinate variable.
fn ncdump_values(file: &Path, var: &str) -> Vec<f64> {
    let out = Command::new("ncdump").arg("-v").arg(var).arg(file).output().expect("ncdump runs");
    assert!(out.status.success());
    let text = String::from_utf8(out.stdout).unwrap();
    let data = text.split("\ndata:\n").nth(1).expect("data section");
    let body = data.split(&format!(" {var} =")).nth(1).expect("variable data");
    let body = body.split(';').next().unwrap();
    body.split(',').map(|s| s.trim().parse::<f64>().expect("a number")).collect()
}

/// What the fixture catalogue says each file holds.
struct Expect {
    file: &'static str,
    format: &'static str,
    lat_var: &'static str,
    lon_var: &'static str,
    lat_order: &'static str,
    periodic: bool,
    calendar: &'static str,
    n_times: usize,
    roles: &'static [(&'static str, &'static str)],
    conversions: &'static [(&'static str, &'static str)],
    impossible: &'static [&'static str],
}

const EXPECT: &[Expect] = &[
    Expect {
        file: "tidy_nc4.nc",
        format: "netCDF-4",
        lat_var: "lat",
        lon_var: "lon",
        lat_order: "south_to_north",
        periodic: false,
        calendar: "standard",
        n_times: 3,
        roles: &[
            ("geopotential", "z"),
            ("temperature", "t"),
            ("humidity", "q"),
            ("surface_pressure", "sp"),
        ],
        conversions: &[("geopotential", "9.80665")],
        impossible: &[],
    },
    Expect {
        file: "packed_classic.nc",
        format: "classic",
        lat_var: "lat",
        lon_var: "lon",
        lat_order: "north_to_south",
        periodic: false,
        calendar: "standard",
        n_times: 3,
        roles: &[("geopotential", "z"), ("temperature", "t")],
        conversions: &[("temperature", "scale_factor"), ("level", "reordered")],
        impossible: &[],
    },
    Expect {
        file: "global_noleap.nc",
        format: "netCDF-4 classic model",
        lat_var: "lat",
        lon_var: "lon",
        lat_order: "south_to_north",
        periodic: true,
        calendar: "noleap",
        n_times: 3,
        roles: &[("geopotential", "zg"), ("temperature", "ta"), ("u", "ua")],
        conversions: &[],
        impossible: &["below_ground_mask"],
    },
    Expect {
        file: "antimeridian_360day.nc",
        format: "64-bit offset",
        lat_var: "lat",
        lon_var: "lon",
        lat_order: "south_to_north",
        periodic: false,
        calendar: "360_day",
        n_times: 3,
        roles: &[("geopotential", "z"), ("temperature", "t")],
        conversions: &[("temperature", "273.15")],
        impossible: &["below_ground_mask"],
    },
    Expect {
        file: "permuted_julian.nc",
        format: "netCDF-4",
        lat_var: "latitude",
        lon_var: "longitude",
        lat_order: "south_to_north",
        periodic: false,
        calendar: "julian",
        n_times: 3,
        roles: &[
            ("geopotential", "hgt_field"),
            ("temperature", "air_temp_k"),
            ("u", "zonal_wind"),
            ("v", "merid_wind"),
        ],
        conversions: &[],
        impossible: &[],
    },
    Expect {
        file: "short_names_allleap.nc",
        format: "classic",
        lat_var: "lat",
        lon_var: "lon",
        lat_order: "south_to_north",
        periodic: false,
        calendar: "all_leap",
        n_times: 3,
        roles: &[("geopotential", "zg"), ("temperature", "ta"), ("u", "ua"), ("v", "va")],
        conversions: &[],
        impossible: &["below_ground_mask"],
    },
    Expect {
        file: "temperature_only.nc",
        format: "netCDF-4",
        lat_var: "lat",
        lon_var: "lon",
        lat_order: "south_to_north",
        periodic: false,
        calendar: "proleptic_gregorian",
        n_times: 3,
        roles: &[("temperature", "t"), ("humidity", "q"), ("surface_pressure", "sp")],
        conversions: &[("surface_pressure", "hPa")],
        impossible: &[
            "geostrophic_wind",
            "thickness_geopotential",
            "balance_ratio",
            "thermal_advection",
            "observed_shear",
            "ageostrophic_shear",
        ],
    },
    Expect {
        file: "cyclic_duplicate.nc",
        format: "netCDF-4",
        lat_var: "lat",
        lon_var: "lon",
        lat_order: "south_to_north",
        periodic: true,
        calendar: "all_leap",
        n_times: 3,
        roles: &[("geopotential", "z")],
        conversions: &[("longitude", "cyclic")],
        impossible: &["below_ground_mask"],
    },
];

#[test]
fn inspect_is_right_on_every_fixture() {
    for e in EXPECT {
        let path = fixture(e.file);
        let doc = ok_json(&["inspect", path.to_str().unwrap(), "--json"]);
        let ctx = e.file;
        assert_eq!(doc["format"], e.format, "{ctx}");
        let grid = &doc["grid"];
        assert_eq!(grid["lat_order_in_file"], e.lat_order, "{ctx}");
        assert_eq!(grid["periodic"], e.periodic, "{ctx}");
        assert_eq!(doc["times"]["calendar"], e.calendar, "{ctx}");
        assert_eq!(doc["times"]["count"], e.n_times, "{ctx}");

        // Coordinates against ncdump: same values, sorted as the reader normalises them.
        let mut lat = ncdump_values(&path, e.lat_var);
        lat.sort_by(f64::total_cmp);
        assert_eq!(grid["n_lat"], lat.len(), "{ctx}");
        assert_eq!(grid["lat_min"].as_f64().unwrap(), lat[0], "{ctx}");
        assert_eq!(grid["lat_max"].as_f64().unwrap(), lat[lat.len() - 1], "{ctx}");
        let lon = ncdump_values(&path, e.lon_var);
        let duplicate = (lon[lon.len() - 1] - lon[0] - 360.0).abs() < 1e-9;
        assert_eq!(grid["n_lon"], lon.len() - usize::from(duplicate), "{ctx}");

        let roles = doc["variables"].as_array().unwrap();
        let find = |role: &str| roles.iter().find(|v| v["role"] == role);
        for (role, var) in e.roles {
            let v = find(role).unwrap_or_else(|| panic!("{ctx}: no {role}"));
            assert_eq!(v["variable"], *var, "{ctx}: {role}");
        }
        for (role, needle) in e.conversions {
            let conv = find(role).unwrap()["conversion"].as_str().unwrap().to_string();
            assert!(conv.contains(needle), "{ctx}: {role} conversion {conv:?} lacks {needle:?}");
        }
        let diags = doc["diagnostics"].as_array().unwrap();
        for d in diags {
            let name = d["name"].as_str().unwrap();
            let expected = !e.impossible.contains(&name);
            assert_eq!(d["possible"], expected, "{ctx}: {name}: {}", d["reason"]);
            if !expected {
                assert!(
                    d["reason"].as_str().unwrap().contains("--var"),
                    "{ctx}: {name} reason names the override"
                );
            }
        }
        // The text form says the same things for a person.
        let out = shearbox(&["inspect", path.to_str().unwrap()]);
        assert!(out.status.success());
        let text = String::from_utf8(out.stdout).unwrap();
        assert!(text.contains(e.calendar) && text.contains("diagnostics"), "{ctx}: {text}");
    }
}

#[test]
fn levels_are_bottom_up_in_hpa_whatever_the_file_units() {
    // packed_classic stores Pa top first; permuted_julian uses "millibars".
    for (file, var, scale) in [
        ("packed_classic.nc", "level", 0.01),
        ("permuted_julian.nc", "pressure", 1.0),
        ("antimeridian_360day.nc", "level", 1.0),
    ] {
        let path = fixture(file);
        let doc = ok_json(&["inspect", path.to_str().unwrap(), "--json"]);
        let got: Vec<f64> =
            doc["levels_hpa"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
        let mut want: Vec<f64> = ncdump_values(&path, var).iter().map(|p| p * scale).collect();
        want.sort_by(|a, b| b.total_cmp(a));
        assert_eq!(got.len(), want.len(), "{file}");
        for (g, w) in got.iter().zip(&want) {
            assert!((g - w).abs() < 1e-6, "{file}: {got:?} vs {want:?}");
        }
    }
}

#[test]
fn profile_json_has_every_field_and_no_nan() {
    let path = fixture("tidy_nc4.nc");
    let doc = ok_json(&["profile", path.to_str().unwrap(), "--bbox=-10,40,10,55"]);
    assert_eq!(doc["time"], "2026-01-14T12:00:00Z", "latest by default");
    assert!(doc["caution"].as_str().unwrap().contains("not an official forecast"));
    let levels = doc["levels"].as_array().unwrap();
    let layers = doc["layers"].as_array().unwrap();
    assert_eq!(layers.len(), levels.len() - 1);
    for pair in levels.windows(2) {
        assert!(pair[0]["pressure_hpa"].as_f64() > pair[1]["pressure_hpa"].as_f64(), "bottom-up");
    }
    for key in [
        "bottom_hpa",
        "top_hpa",
        "thickness_m",
        "thickness_method",
        "thickness_from_temperature_m",
        "mean_temperature_k",
        "thermal_wind",
        "temperature_gradient_k_per_100km",
        "baroclinic_torque_s2",
        "balance_ratio",
        "thermal_advection_k_per_day",
        "turning",
        "eady_growth_rate_per_day",
        "observed_shear",
        "ageostrophic_shear",
        "valid_cells",
        "masked",
    ] {
        assert!(layers[0].get(key).is_some(), "layer field {key}");
    }
    let text = serde_json::to_string(&doc).unwrap();
    assert!(!text.contains("NaN") && !text.contains("inf"));
    // A deep layer on request, and the table form.
    let deep = ok_json(&[
        "profile",
        path.to_str().unwrap(),
        "--bbox=-10,40,10,55",
        "--layer",
        "1000-500",
        "--time",
        "2026-01-14T06:00Z",
    ]);
    assert_eq!(deep["time"], "2026-01-14T06:00:00Z");
    let deep_layers = deep["layers"].as_array().unwrap();
    assert_eq!(deep_layers.len(), 1);
    assert_eq!(deep_layers[0]["bottom_hpa"], 1000.0);
    assert_eq!(deep_layers[0]["top_hpa"], 500.0);
    let out =
        shearbox(&["profile", path.to_str().unwrap(), "--bbox=-10,40,10,55", "--format", "table"]);
    assert!(out.status.success());
    let table = String::from_utf8(out.stdout).unwrap();
    let rows = table
        .lines()
        .filter(|l| {
            l.trim_start()
                .split(' ')
                .next()
                .is_some_and(|w| w.contains('-') && w.chars().next().unwrap().is_ascii_digit())
        })
        .count();
    assert_eq!(rows, layers.len(), "{table}");
}

#[test]
fn temperature_only_files_use_the_hypsometric_thickness() {
    let path = fixture("temperature_only.nc");
    let doc = ok_json(&["profile", path.to_str().unwrap(), "--bbox=-10,40,10,55"]);
    for l in doc["layers"].as_array().unwrap() {
        assert_eq!(l["thickness_method"], "temperature");
        assert_eq!(l["thickness_m"], l["thickness_from_temperature_m"]);
        assert!(l["thermal_wind"].is_object(), "thermal wind from temperature");
        assert!(l["thermal_advection_k_per_day"].is_null(), "advection needs geopotential");
        assert!(l["balance_ratio"].is_null(), "balance needs both fields");
        assert!(l["turning"].is_null());
    }
    for l in doc["levels"].as_array().unwrap() {
        assert!(l["geostrophic_wind"].is_null());
        assert_eq!(l["valid_cells"], 0);
    }
}

fn fails_with(args: &[&str], needles: &[&str]) {
    let out = shearbox(args);
    assert!(!out.status.success(), "{args:?} should fail");
    let err = String::from_utf8_lossy(&out.stderr);
    assert!(!err.contains("panicked"), "{args:?}: {err}");
    for n in needles {
        assert!(err.contains(n), "{args:?}: {err:?} lacks {n:?}");
    }
}

#[test]
fn bad_requests_get_clear_errors() {
    let tidy = fixture("tidy_nc4.nc");
    let f = tidy.to_str().unwrap();
    fails_with(&["profile", f, "--bbox", "1,2,3"], &["bbox", "four"]);
    fails_with(&["profile", f, "--bbox=0,60,10,50"], &["south"]);
    // A box with no cell centre, between grid columns: the grid's extent is stated.
    fails_with(&["profile", f, "--bbox=100,40,110,50"], &["no grid cell", "-40"]);
    fails_with(
        &["profile", f, "--bbox=-10,40,10,55", "--time", "2027-01-01"],
        &["2026-01-14T00:00:00Z", "2026-01-14T12:00:00Z"],
    );
    fails_with(&["profile", f, "--bbox=-10,40,10,55", "--time", "yesterday"], &["yesterday"]);
    fails_with(&["profile", f, "--bbox=-10,40,10,55", "--layer", "1000-600"], &["600", "925"]);
    fails_with(&["profile", f, "--bbox=-10,40,10,55", "--layer", "500-1000"], &["higher pressure"]);
    fails_with(&["profile", f, "--bbox=-10,40,10,55", "--var", "temperature=nope"], &["nope"]);
    fails_with(&["inspect", "/nonexistent/file.nc"], &["/nonexistent/file.nc"]);
}
