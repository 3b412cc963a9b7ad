//! End-to-end tests of `shearbox compute` and `shearbox join`: the file's structure as
//! netCDF-C's `ncdump` reads it, values equal to the kernel's, shards joined equal to one run,
//! multi-file input in any order, interrupted runs, memory that does not grow with the number
//! of steps, and clear errors.
//!
//! Outside references: netCDF-C's `ncdump` (structure, `-t` time decoding) and the CF
//! Conventions 1.8 (the attributes checked). The CF compliance checker and the numpy
//! cross-check of the values run from `tests/reference/check_compute.sh`.

use std::io::{BufRead, BufReader};
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};
use std::sync::OnceLock;

use shearbox_cf::write::PartFile;
use shearbox_cf::{Dataset, VarOverrides};
use shearbox_core::{Config, compute};

mod common;

use common::{fixture, shearbox};

fn ok(args: &[&str]) -> String {
    let out = shearbox(args);
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(out.status.success(), "{args:?} failed: {err}");
    err
}

fn fails(args: &[&str]) -> String {
    let out = shearbox(args);
    let err = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(!out.status.success(), "{args:?} should fail");
    assert!(!err.contains("panicked"), "{args:?} panicked: {err}");
    err
}

fn s(p: &Path) -> &str {
    p.to_str().expect("utf-8 path")
}

/// A multi-file series made by the fixture generator: 40 six-hourly steps in 5 files at 1°,
/// 17 levels (made once per test run).
fn series() -> &'static Path {
    static DIR: OnceLock<tempfile::TempDir> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = tempfile::tempdir().unwrap();
        let bin_dir = Path::new(env!("CARGO_BIN_EXE_shearbox")).parent().unwrap().to_path_buf();
        let generator = bin_dir.join("shearbox-fixtures");
        if !generator.exists() {
            let mut build = Command::new(env!("CARGO"));
            build.args(["build", "-p", "shearbox-fixtures"]);
            if bin_dir.ends_with("release") {
                build.arg("--release");
            }
            assert!(build.status().unwrap().success(), "building the fixture generator");
        }
        let status = Command::new(generator)
            .args(["series", s(dir.path()), "40", "5", "1.0"])
            .stdout(Stdio::null())
            .status()
            .unwrap();
        assert!(status.success());
        dir
    })
    .path()
}

fn series_file(i: usize) -> PathBuf {
    series().join(format!("kestrel_series_{i:03}.nc"))
}

fn ncdump(args: &[&str], file: &Path) -> String {
    let out = Command::new("ncdump").args(args).arg(file).output().expect("ncdump runs");
    assert!(out.status.success(), "ncdump {args:?} {}", file.display());
    String::from_utf8(out.stdout).unwrap()
}

/// Every time-varying variable of two files, compared bit for bit, and their times.
fn assert_same_data(a: &Path, b: &Path) {
    let (pa, pb) = (PartFile::open(a).unwrap(), PartFile::open(b).unwrap());
    assert_eq!(pa.times(), pb.times(), "times of {} and {}", a.display(), b.display());
    let strip = |h: &shearbox_cf::write::Header| {
        let mut h = h.clone();
        h.global_attrs.retain(|(n, _)| n != "history");
        h
    };
    assert_eq!(
        strip(pa.header()),
        strip(pb.header()),
        "headers of {} and {}",
        a.display(),
        b.display()
    );
    let header = pa.header();
    for v in header.vars.iter().filter(|v| header.is_time_varying(v) && v.name != "time") {
        for t in 0..pa.times().len() {
            let (x, y) = (pa.read_step(&v.name, t).unwrap(), pb.read_step(&v.name, t).unwrap());
            assert!(
                x.iter().zip(&y).all(|(p, q)| p.to_bits() == q.to_bits()),
                "{} step {t} differs between {} and {}",
                v.name,
                a.display(),
                b.display()
            );
        }
    }
}

#[test]
fn structure_read_back_by_ncdump() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("tidy.nc");
    ok(&["compute", s(&fixture("tidy_nc4.nc")), "-o", s(&out), "-q"]);
    let ds = Dataset::open(&fixture("tidy_nc4.nc"), &VarOverrides::default()).unwrap();
    let (n_lat, n_lon, n_lev) = (ds.grid().n_lat(), ds.grid().n_lon(), ds.levels().len());
    let header = ncdump(&["-h"], &out);
    // netCDF-4 with the unlimited time dimension holding every step of the input.
    assert_eq!(ncdump(&["-k"], &out).trim(), "netCDF-4");
    for dim in [
        format!("time = UNLIMITED ; // ({} currently)", ds.n_steps()),
        format!("layer = {} ;", n_lev - 1),
        format!("level = {n_lev} ;"),
        "nv = 2 ;".to_string(),
        format!("lat = {n_lat} ;"),
        format!("lon = {n_lon} ;"),
    ] {
        assert!(header.contains(&dim), "missing dimension {dim}:\n{header}");
    }
    // The variables and dimensions the issue names; CF standard names where the table
    // (v83) has one; SI units.
    let layer_vars = [
        ("thermal_wind_u", None, "m s-1"),
        ("thermal_wind_v", None, "m s-1"),
        (
            "thickness",
            Some("atmosphere_layer_thickness_expressed_as_geopotential_height_difference"),
            "m",
        ),
        ("layer_mean_temperature", None, "K"),
        ("temperature_gradient", None, "K m-1"),
        ("baroclinic_torque", None, "s-2"),
        ("balance_ratio", None, "1"),
        ("thermal_advection", Some("tendency_of_air_temperature_due_to_advection"), "K s-1"),
        ("eady_growth_rate", None, "s-1"),
    ];
    for (name, standard_name, units) in layer_vars {
        assert!(header.contains(&format!("float {name}(time, layer, lat, lon) ;")), "{name}");
        assert!(header.contains(&format!("{name}:units = \"{units}\" ;")), "{name} units");
        assert!(header.contains(&format!("{name}:long_name = ")), "{name} long_name");
        assert!(header.contains(&format!("{name}:_FillValue = 9.96921e+36f ;")), "{name} fill");
        if let Some(sn) = standard_name {
            assert!(header.contains(&format!("{name}:standard_name = \"{sn}\" ;")), "{name}");
        }
    }
    for name in ["layer_mean_temperature", "temperature_gradient", "thermal_advection"] {
        assert!(header.contains(&format!("{name}:cell_methods = \"layer: mean\" ;")), "{name}");
    }
    for (name, sn) in [
        ("geostrophic_u", "geostrophic_eastward_wind"),
        ("geostrophic_v", "geostrophic_northward_wind"),
    ] {
        assert!(header.contains(&format!("float {name}(time, level, lat, lon) ;")), "{name}");
        assert!(header.contains(&format!("{name}:standard_name = \"{sn}\" ;")), "{name}");
    }
    for line in [
        "double layer_bounds(layer, nv) ;",
        "layer:bounds = \"layer_bounds\" ;",
        "double layer_bottom(layer) ;",
        "layer_bottom:units = \"hPa\" ;",
        "double layer_top(layer) ;",
        ":Conventions = \"CF-1.8\" ;",
        ":constant_g0_m_per_s2 = 9.80665 ;",
        ":constant_earth_radius_m = 6371229. ;",
        ":equatorial_band_half_width_degrees = 5. ;",
    ] {
        assert!(header.contains(line), "missing {line}:\n{header}");
    }
    assert!(header.contains(":history = \"") && header.contains("compute"), "history");
    assert!(header.contains(":source = \"shearbox") && header.contains("tidy_nc4.nc"), "source");
    assert!(header.contains("not an official forecast"), "caution in comment");
    // Chunks of one step × one layer × the grid (ncdump -s).
    let special = ncdump(&["-hs"], &out);
    assert!(
        special.contains(&format!("thermal_wind_u:_ChunkSizes = 1, 1, {n_lat}, {n_lon} ;")),
        "{special}"
    );
    assert!(special.contains("thermal_wind_u:_DeflateLevel = 1 ;"));
    assert!(special.contains("thermal_wind_u:_Shuffle = \"true\" ;"));
    // Layer bounds are the adjacent level pairs, in hPa, as ncdump prints them.
    let levels = ds.levels().all_hpa();
    let bottoms = ncdump(&["-v", "layer_bottom"], &out);
    let body = bottoms.split("layer_bottom =").nth(1).unwrap().split(';').next().unwrap();
    let values: Vec<f64> = body.split(',').map(|v| v.trim().parse().unwrap()).collect();
    assert_eq!(values, levels[..levels.len() - 1].to_vec());
    // Times decoded by ncdump -t equal the input's (CF calendar arithmetic of netCDF-C).
    let t_out = ncdump(&["-t", "-v", "time"], &out);
    let t_in = ncdump(&["-t", "-v", "time"], &fixture("tidy_nc4.nc"));
    let data = |text: &str| {
        text.split(" time =").last().unwrap().split(';').next().unwrap().replace(['\n', ' '], "")
    };
    assert_eq!(data(&t_out), data(&t_in));
}

#[test]
fn values_equal_the_kernel_in_the_input_grid_order() {
    // Fixtures with latitudes stored north to south, packed classic files, periodic grids,
    // the antimeridian, and a file without geopotential.
    for name in [
        "tidy_nc4.nc",
        "packed_classic.nc",
        "global_noleap.nc",
        "antimeridian_360day.nc",
        "temperature_only.nc",
    ] {
        let dir = tempfile::tempdir().unwrap();
        let out = dir.path().join("out.nc");
        let input = fixture(name);
        ok(&["compute", s(&input), "-o", s(&out), "-q", "--layers", "adjacent"]);
        let ds = Dataset::open(&input, &VarOverrides::default()).unwrap();
        let part = PartFile::open(&out).unwrap();
        // Latitudes in the file's own order and values, as ncdump prints them.
        let dump = ncdump(&["-v", "lat"], &input);
        let body = dump.split(" lat =").last().unwrap().split(';').next().unwrap();
        let raw_lat: Vec<f64> = body.split(',').map(|v| v.trim().parse().unwrap()).collect();
        let lat = part.header().vars.iter().find(|v| v.name == "lat").unwrap();
        assert_eq!(lat.data.as_ref().unwrap(), &raw_lat, "{name}: latitudes");
        let layers = ds.levels().adjacent_layers();
        let (n_lat, n_lon) = (ds.grid().n_lat(), ds.grid().n_lon());
        assert_eq!(part.times().len(), ds.n_steps(), "{name}");
        for t in 0..ds.n_steps() {
            let fields = ds.read_fields(t, None).unwrap();
            let diag = compute(&fields, &layers, &Config::default());
            let check = |var: &str, arrays: Vec<&ndarray::Array2<f32>>| {
                let got = part.read_step(var, t).unwrap();
                assert_eq!(got.len(), arrays.len() * n_lat * n_lon, "{name} {var}");
                for (k, a) in arrays.iter().enumerate() {
                    for j in 0..n_lat {
                        let jj = if ds.latitude_descending() { n_lat - 1 - j } else { j };
                        for i in 0..n_lon {
                            let (x, y) = (got[(k * n_lat + j) * n_lon + i], a[[jj, i]]);
                            assert!(
                                x.to_bits() == y.to_bits() || (x.is_nan() && y.is_nan()),
                                "{name} {var} step {t} layer {k} cell ({j},{i}): {x} vs {y}"
                            );
                        }
                    }
                }
            };
            check("thermal_wind_u", diag.layers.iter().map(|l| &l.thermal_wind_u).collect());
            check("thermal_wind_v", diag.layers.iter().map(|l| &l.thermal_wind_v).collect());
            check("thickness", diag.layers.iter().map(|l| &l.thickness).collect());
            check(
                "layer_mean_temperature",
                diag.layers.iter().map(|l| &l.mean_temperature).collect(),
            );
            check(
                "temperature_gradient",
                diag.layers.iter().map(|l| &l.temperature_gradient).collect(),
            );
            check("baroclinic_torque", diag.layers.iter().map(|l| &l.baroclinic_torque).collect());
            let optional = [
                (
                    "balance_ratio",
                    diag.layers
                        .iter()
                        .map(|l| l.balance_ratio.as_ref())
                        .collect::<Option<Vec<_>>>(),
                ),
                (
                    "thermal_advection",
                    diag.layers.iter().map(|l| l.thermal_advection.as_ref()).collect(),
                ),
                (
                    "eady_growth_rate",
                    diag.layers.iter().map(|l| l.eady_growth_rate.as_ref()).collect(),
                ),
            ];
            for (var, arrays) in optional {
                let in_file = part.header().vars.iter().any(|v| v.name == var);
                assert_eq!(in_file, arrays.is_some(), "{name}: {var} written exactly when defined");
                if let Some(a) = arrays {
                    check(var, a);
                }
            }
            if diag.levels.is_empty() {
                assert!(part.header().vars.iter().all(|v| v.name != "geostrophic_u"), "{name}");
            } else {
                check("geostrophic_u", diag.levels.iter().map(|l| &l.geostrophic_u).collect());
                check("geostrophic_v", diag.levels.iter().map(|l| &l.geostrophic_v).collect());
            }
        }
    }
}

#[test]
fn deep_layers_and_region_profiles_equal_the_profile_command() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("deep.nc");
    let regions = dir.path().join("regions.txt");
    std::fs::write(&regions, "# two boxes\nfront 2,42,10,50\nsouth -2,38,6,44\n").unwrap();
    let input = fixture("tidy_nc4.nc");
    ok(&[
        "compute",
        s(&input),
        "-o",
        s(&out),
        "-q",
        "--layers",
        "1000-500,850-300",
        "--regions",
        s(&regions),
    ]);
    let header = ncdump(&["-h"], &out);
    assert!(header.contains("layer = 2 ;"), "{header}");
    let bounds = ncdump(&["-v", "layer_bounds"], &out);
    let body = bounds.split("layer_bounds =").nth(1).unwrap().split(';').next().unwrap();
    let values: Vec<f64> = body.split(',').map(|v| v.trim().parse().unwrap()).collect();
    assert_eq!(values, vec![1000.0, 500.0, 850.0, 300.0]);
    // Each JSON line is the profile document of `shearbox profile` for that box, time and
    // layer, plus the region's name.
    let lines = std::fs::read_to_string(dir.path().join("deep.profiles.jsonl")).unwrap();
    let ds = Dataset::open(&input, &VarOverrides::default()).unwrap();
    let docs: Vec<serde_json::Value> =
        lines.lines().map(|l| serde_json::from_str(l).unwrap()).collect();
    assert_eq!(docs.len(), 2 * ds.n_steps());
    for doc in &docs {
        let region = doc["region"].as_str().unwrap();
        let bbox = if region == "front" { "2,42,10,50" } else { "-2,38,6,44" };
        for (i, layer) in ["1000-500", "850-300"].iter().enumerate() {
            let out = shearbox(&[
                "profile",
                s(&input),
                &format!("--bbox={bbox}"),
                "--time",
                doc["time"].as_str().unwrap(),
                "--layer",
                layer,
            ]);
            assert!(out.status.success());
            let single: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
            assert_eq!(single["layers"][0], doc["layers"][i], "{region} {layer}");
            assert_eq!(single["levels"], doc["levels"], "{region}");
        }
    }
    // The CSV files hold one row per region, time and layer (or level), plus the header.
    let layers_csv = std::fs::read_to_string(dir.path().join("deep.layers.csv")).unwrap();
    assert_eq!(layers_csv.lines().count(), 1 + 2 * 2 * ds.n_steps());
    let levels_csv = std::fs::read_to_string(dir.path().join("deep.levels.csv")).unwrap();
    assert_eq!(levels_csv.lines().count(), 1 + 2 * ds.levels().len() * ds.n_steps());
    let header: Vec<&str> = layers_csv.lines().next().unwrap().split(',').collect();
    assert!(layers_csv.lines().all(|l| l.split(',').count() == header.len()));
}

#[test]
fn shards_joined_equal_one_run() {
    let dir = tempfile::tempdir().unwrap();
    let pattern = series().join("kestrel_series_*.nc");
    let common = ["--to", "2026-01-15T12:00Z", "--box=-20,40,0,60", "-q"];
    let one = dir.path().join("one.nc");
    let mut args = vec!["compute", s(&pattern), "-o", s(&one)];
    args.extend(common);
    ok(&args);
    // Six steps in 4 parts (1, 2, 1, 2 steps) and in 8 parts (two of them empty), joined
    // from parts given in reverse order.
    for n in [4usize, 8] {
        let mut parts = Vec::new();
        for k in 1..=n {
            let part = dir.path().join(format!("part{n}_{k}.nc"));
            let shard = format!("{k}/{n}");
            let mut args = vec!["compute", s(&pattern), "-o", s(&part), "--shard", &shard];
            args.extend(common);
            ok(&args);
            parts.push(part);
        }
        let joined = dir.path().join(format!("joined{n}.nc"));
        let mut args = vec!["join", "-o", s(&joined), "-q"];
        args.extend(parts.iter().rev().map(|p| s(p)));
        ok(&args);
        assert_same_data(&one, &joined);
        for ext in ["layers.csv", "levels.csv", "profiles.jsonl"] {
            let a = std::fs::read(dir.path().join(format!("one.{ext}"))).unwrap();
            let b = std::fs::read(dir.path().join(format!("joined{n}.{ext}"))).unwrap();
            assert!(a == b, "{ext} of {n} joined parts differs from one run");
        }
    }
    // Overlapping parts are refused.
    let err = fails(&[
        "join",
        "-o",
        s(&dir.path().join("bad.nc")),
        s(&one),
        s(&dir.path().join("part4_1.nc")),
    ]);
    assert!(err.contains("overlap"), "{err}");
}

#[test]
fn both_writers_write_the_same_file() {
    // The direct writer (chunks compressed on all cores, appended through HDF5) against the
    // netCDF library's own: netCDF-C's ncdump prints the same text for both, every value
    // equal, and the same storage (chunks, shuffle, deflate).
    let dir = tempfile::tempdir().unwrap();
    let pattern = series().join("kestrel_series_*.nc");
    let mut dumps = Vec::new();
    for writer in ["direct", "library"] {
        let out = dir.path().join(format!("{writer}.nc"));
        ok(&[
            "compute",
            s(&pattern),
            "-o",
            s(&out),
            "-q",
            "--to",
            "2026-01-15T00Z",
            "--writer",
            writer,
        ]);
        let text = ncdump(&[], &out);
        let body: Vec<&str> = text.lines().skip(1).filter(|l| !l.contains(":history = ")).collect();
        dumps.push(body.join("\n"));
        let special = ncdump(&["-hs"], &out);
        assert!(special.contains("thermal_wind_u:_ChunkSizes = 1, 1, 61, 101 ;"), "{writer}");
        assert!(special.contains("thermal_wind_u:_DeflateLevel = 1 ;"), "{writer}");
        assert!(special.contains("thermal_wind_u:_Shuffle = \"true\" ;"), "{writer}");
    }
    assert!(dumps[0] == dumps[1], "ncdump of the two writers' files differs");
    assert!(dumps[0].contains("time = 1768348800, 1768370400, 1768392000, 1768413600, 1768435200"));
    assert_same_data(&dir.path().join("direct.nc"), &dir.path().join("library.nc"));
    // Uncompressed, too.
    for writer in ["direct", "library"] {
        let out = dir.path().join(format!("plain_{writer}.nc"));
        ok(&[
            "compute",
            s(&series_file(0)),
            "-o",
            s(&out),
            "-q",
            "--deflate",
            "0",
            "--writer",
            writer,
        ]);
        assert!(!ncdump(&["-hs"], &out).contains("_DeflateLevel"), "{writer}");
    }
    assert_same_data(&dir.path().join("plain_direct.nc"), &dir.path().join("plain_library.nc"));
}

#[test]
fn globbed_and_listed_inputs_in_any_order_give_the_same_file() {
    let dir = tempfile::tempdir().unwrap();
    let by_glob = dir.path().join("glob.nc");
    ok(&[
        "compute",
        s(&series().join("kestrel_series_*.nc")),
        "-o",
        s(&by_glob),
        "-q",
        "--layers",
        "1000-500",
    ]);
    let reversed = dir.path().join("reversed.nc");
    let files: Vec<PathBuf> = (0..5).rev().map(series_file).collect();
    let mut args = vec!["compute"];
    args.extend(files.iter().map(|p| s(p)));
    args.extend(["-o", s(&reversed), "-q", "--layers", "1000-500"]);
    ok(&args);
    assert_same_data(&by_glob, &reversed);
    // 40 six-hourly steps from 2026-01-14T00, decoded from two time encodings by ncdump.
    let times = ncdump(&["-t", "-v", "time"], &by_glob);
    let data = times.split(" time =").last().unwrap();
    assert_eq!(data.matches('"').count(), 80, "{data}");
    assert!(data.contains("\"2026-01-14\"") && data.contains("\"2026-01-23 18\""), "{data}");
}

#[test]
fn bad_inputs_stop_the_run_or_are_skipped_and_listed() {
    let dir = tempfile::tempdir().unwrap();
    let garbage = dir.path().join("garbage.nc");
    std::fs::write(&garbage, b"this is not a netCDF file at all").unwrap();
    let out = dir.path().join("out.nc");
    let a = series_file(0);
    let err = fails(&["compute", s(&a), s(&garbage), "-o", s(&out)]);
    assert!(err.contains("garbage.nc") && err.contains("--skip-bad"), "{err}");
    assert!(!out.exists());
    let log = ok(&["compute", s(&a), s(&garbage), "-o", s(&out), "--skip-bad"]);
    assert!(log.contains("skipped file") && log.contains("garbage.nc"), "{log}");
    assert_eq!(PartFile::open(&out).unwrap().times().len(), 8);
    // An existing output is not replaced without --force, and stays as it was.
    let before = std::fs::read(&out).unwrap();
    let err = fails(&["compute", s(&a), "-o", s(&out)]);
    assert!(err.contains("--force"), "{err}");
    assert_eq!(std::fs::read(&out).unwrap(), before);
    // A time that appears twice names both files.
    let copy = dir.path().join("copy.nc");
    std::fs::copy(&a, &copy).unwrap();
    let err = fails(&["compute", s(&a), s(&copy), "-o", s(&dir.path().join("dup.nc"))]);
    assert!(err.contains("appears twice") && err.contains("copy.nc"), "{err}");
    // Another grid names the file and what differs.
    let err =
        fails(&["compute", s(&a), s(&fixture("tidy_nc4.nc")), "-o", s(&dir.path().join("mix.nc"))]);
    assert!(err.contains("tidy_nc4.nc") && err.contains("grid"), "{err}");
    // Times outside the inputs give their range; bad options say what is expected.
    let err = fails(&["compute", s(&a), "-o", s(&dir.path().join("x.nc")), "--from", "2030-01-01"]);
    assert!(err.contains("2026-01-14T00:00:00Z") && err.contains("8 steps"), "{err}");
    let err = fails(&["compute", s(&a), "-o", s(&dir.path().join("x.nc")), "--shard", "5/4"]);
    assert!(err.contains("from 1 to N"), "{err}");
    let err = fails(&["compute", s(&a), "-o", s(&dir.path().join("x.nc")), "--layers", "1000-123"]);
    assert!(err.contains("123"), "{err}");
    let err = fails(&["compute", s(&a), "-o", s(&dir.path().join("x.nc")), "--box=100,0,110,5"]);
    assert!(err.contains("box"), "{err}");
    let err =
        fails(&["compute", s(&dir.path().join("none_*.nc")), "-o", s(&dir.path().join("x.nc"))]);
    assert!(err.contains("matches no file"), "{err}");
    for name in ["x.nc", "dup.nc", "mix.nc"] {
        assert!(!dir.path().join(name).exists(), "{name} written by a failed run");
    }
    let leftovers: Vec<_> = std::fs::read_dir(dir.path())
        .unwrap()
        .filter_map(Result::ok)
        .filter(|e| e.file_name().to_string_lossy().contains(".tmp-"))
        .collect();
    assert!(leftovers.is_empty(), "temporary files left: {leftovers:?}");
}

/// Starts a compute run over the whole series and sends `signal` once two steps are done.
fn interrupt(signal: &str, out: &Path) -> std::process::ExitStatus {
    let mut child = Command::new(env!("CARGO_BIN_EXE_shearbox"))
        .args(["compute", s(&series().join("kestrel_series_*.nc")), "-o", s(out), "--force"])
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let stderr = child.stderr.take().unwrap();
    let mut lines = BufReader::new(stderr).lines();
    for line in lines.by_ref() {
        if line.unwrap().contains("step 2/40") {
            break;
        }
    }
    let status = Command::new("kill").args([signal, &child.id().to_string()]).status().unwrap();
    assert!(status.success());
    for _ in lines {}
    child.wait().unwrap()
}

#[test]
fn an_interrupted_run_leaves_the_previous_output_and_nothing_else() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("nightly.nc");
    std::fs::write(&out, b"yesterday's output").unwrap();
    for (signal, code) in [("-INT", Some(130)), ("-TERM", Some(130)), ("-KILL", None)] {
        let status = interrupt(signal, &out);
        assert_eq!(status.code(), code, "{signal}");
        assert_eq!(std::fs::read(&out).unwrap(), b"yesterday's output", "{signal}");
        let temps: Vec<String> = std::fs::read_dir(dir.path())
            .unwrap()
            .filter_map(Result::ok)
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.contains(".tmp-"))
            .collect();
        if code.is_some() {
            assert!(temps.is_empty(), "{signal}: temporary files left: {temps:?}");
        } else {
            // Killed outright, a run cannot clean up: its temporary file may stay, under a
            // name that is never the target's.
            assert!(temps.iter().all(|n| n.starts_with(".nightly.nc.tmp-")), "{temps:?}");
        }
    }
}

#[test]
fn a_full_disk_leaves_no_file_and_says_why() {
    // A file-size limit (ulimit -f, in 1024-byte blocks) stands in for a full disk: the run
    // must stop with an error naming the cause, keep the earlier output and leave no
    // temporary file, with either writer.
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("nightly.nc");
    std::fs::write(&out, b"yesterday's output").unwrap();
    let pattern = series().join("kestrel_series_*.nc");
    for writer in ["direct", "library"] {
        let command = format!(
            "ulimit -f 3000; exec '{}' compute '{}' -o '{}' --force -q --writer {writer}",
            env!("CARGO_BIN_EXE_shearbox"),
            s(&pattern),
            s(&out)
        );
        let run = Command::new("sh").args(["-c", &command]).output().unwrap();
        let err = String::from_utf8_lossy(&run.stderr);
        assert_eq!(run.status.code(), Some(1), "{writer}: {err}");
        assert!(
            err.contains("nightly.nc") && err.contains("nothing was written"),
            "{writer}: {err}"
        );
        assert!(!err.contains("panicked"), "{writer}: {err}");
        assert_eq!(std::fs::read(&out).unwrap(), b"yesterday's output", "{writer}");
        let names: Vec<String> = std::fs::read_dir(dir.path())
            .unwrap()
            .filter_map(Result::ok)
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .collect();
        assert_eq!(names, vec!["nightly.nc".to_string()], "{writer}");
        if writer == "direct" {
            assert!(err.contains("File too large"), "{err}");
        }
    }
}

/// The peak resident memory a run reports, MiB.
fn peak_mib(log: &str) -> f64 {
    let tail = log.split("peak memory ").nth(1).expect("summary with peak memory");
    tail.split_whitespace().next().unwrap().parse().unwrap()
}

#[test]
fn memory_does_not_grow_with_the_number_of_steps() {
    let dir = tempfile::tempdir().unwrap();
    let pattern = series().join("kestrel_series_*.nc");
    let run = |to: &str| {
        let out = dir.path().join("m.nc");
        peak_mib(&ok(&[
            "compute",
            s(&pattern),
            "-o",
            s(&out),
            "--force",
            "--to",
            to,
            "--threads",
            "2",
        ]))
    };
    // Ten steps fill the pipeline (every stage busy at once); forty steps add thirty more
    // steps of 2 MB input and 9 MB output each. Memory bounded by one step's worth of
    // buffers stays within 20 %.
    let (ten, forty) = (run("2026-01-16T06:00Z"), run("2026-01-23T18:00Z"));
    assert!(
        forty < 1.2 * ten,
        "peak memory {forty:.0} MiB for 40 steps against {ten:.0} MiB for 10"
    );
}
