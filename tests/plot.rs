//! End-to-end tests of `shearbox plot` on the committed fixtures: the files it writes (names,
//! one pair per region and step, nothing left under a temporary name), their contents parsed
//! as XML (roxmltree, an XML 1.0 parser) and checked against `shearbox profile` for the same
//! box and time, and the errors of bad boxes, levels, times and files.

use std::path::Path;
use std::process::Output;

use roxmltree::{Document, Node};
use serde_json::Value;

mod common;

use common::{fixture, shearbox};

fn ok(args: &[&str]) -> Output {
    let out = shearbox(args);
    assert!(out.status.success(), "{args:?}: {}", String::from_utf8_lossy(&out.stderr));
    out
}

/// The error message of a run that must fail.
fn fails(args: &[&str]) -> String {
    let out = shearbox(args);
    assert!(!out.status.success(), "{args:?} succeeded");
    let err = String::from_utf8_lossy(&out.stderr).to_string();
    assert!(!err.contains("panicked"), "{args:?}: {err}");
    err
}

/// Every file name in `dir`, sorted.
fn listing(dir: &Path) -> Vec<String> {
    let mut names: Vec<String> = std::fs::read_dir(dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .collect();
    names.sort();
    names
}

fn with_class<'a, 'i>(doc: &'a Document<'i>, tag: &str, class: &str) -> Vec<Node<'a, 'i>> {
    doc.descendants()
        .filter(|n| n.has_tag_name(tag) && n.attribute("class") == Some(class))
        .collect()
}

fn num(n: &Node<'_, '_>, name: &str) -> f64 {
    n.attribute(name).and_then(|v| v.parse().ok()).unwrap_or_else(|| panic!("{name} on {n:?}"))
}

/// Reads a picture, checks the contract every picture keeps, and hands over its text.
fn picture(path: &Path) -> String {
    let text = std::fs::read_to_string(path).unwrap();
    let doc = Document::parse(&text).unwrap_or_else(|e| panic!("{}: {e}", path.display()));
    let root = doc.root_element();
    assert!(root.has_tag_name("svg") && root.attribute("viewBox").is_some());
    assert!(root.children().any(|n| n.has_tag_name("title")));
    let caution = with_class(&doc, "text", "caution");
    assert_eq!(caution.len(), 1, "{}", path.display());
    assert!(caution[0].text().unwrap().contains("not an official"));
    text
}

#[test]
fn regions_and_every_time_give_one_pair_each() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("pictures");
    let regions = dir.path().join("regions.txt");
    std::fs::write(&regions, "# two boxes\nserrin -20,35,10,50\nnorth -30,50,0,65\n").unwrap();
    let file = fixture("tidy_nc4.nc");
    let printed = ok(&[
        "plot",
        file.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--regions",
        regions.to_str().unwrap(),
        "--time",
        "all",
    ]);
    let mut want = Vec::new();
    for stamp in ["20260114T000000Z", "20260114T060000Z", "20260114T120000Z"] {
        for region in ["north", "serrin"] {
            want.push(format!("{region}_{stamp}_hodograph.svg"));
            want.push(format!("{region}_{stamp}_map_1000-500hPa.svg"));
        }
    }
    want.sort();
    assert_eq!(listing(&out), want, "no temporary file is left");
    let printed = String::from_utf8(printed.stdout).unwrap();
    assert_eq!(printed.lines().count(), 12);

    // The hodograph's points are the levels `shearbox profile` finds a geostrophic wind at.
    let profile: Value = serde_json::from_slice(
        &ok(&[
            "profile",
            file.to_str().unwrap(),
            "--bbox",
            "-20,35,10,50",
            "--time",
            "2026-01-14T06:00Z",
        ])
        .stdout,
    )
    .unwrap();
    let text = picture(&out.join("serrin_20260114T060000Z_hodograph.svg"));
    let doc = Document::parse(&text).unwrap();
    let points: Vec<f64> =
        with_class(&doc, "circle", "level").iter().map(|n| num(n, "data-pressure-hpa")).collect();
    let want: Vec<f64> = profile["levels"]
        .as_array()
        .unwrap()
        .iter()
        .filter(|l| !l["geostrophic_wind"].is_null())
        .map(|l| l["pressure_hpa"].as_f64().unwrap())
        .collect();
    assert_eq!(points, want);
    assert!(
        doc.root_element().children().any(|n| n.text().is_some_and(|t| t.contains("tidy_nc4.nc")))
    );

    // The map of the same box: arrows, contour labels in multiples of 60 m, the box's extent
    // (2.5° grid: half a spacing beyond the outer cell centres).
    let text = picture(&out.join("serrin_20260114T060000Z_map_1000-500hPa.svg"));
    let doc = Document::parse(&text).unwrap();
    assert_eq!(doc.root_element().attribute("data-bbox"), Some("-21.25,33.75,11.25,51.25"));
    assert!(!with_class(&doc, "g", "arrow").is_empty());
    let labels = with_class(&doc, "text", "contour-label");
    assert!(!labels.is_empty());
    for l in labels {
        let value: f64 = l.text().unwrap().trim().parse().unwrap();
        assert_eq!(value % 60.0, 0.0);
    }

    // A second run replaces nothing without --force, and leaves the files as they were.
    let before = std::fs::read(out.join("north_20260114T000000Z_hodograph.svg")).unwrap();
    let args = [
        "plot",
        file.to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--regions",
        regions.to_str().unwrap(),
    ];
    let err = fails(&args);
    assert!(err.contains("already exist") && err.contains("--force"), "{err}");
    assert_eq!(std::fs::read(out.join("north_20260114T000000Z_hodograph.svg")).unwrap(), before);
    let mut forced = args.to_vec();
    forced.push("--force");
    ok(&forced);
    assert_eq!(listing(&out).len(), 12);
}

#[test]
fn one_box_one_step_by_index_and_a_chosen_layer() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path();
    ok(&[
        "plot",
        fixture("tidy_nc4.nc").to_str().unwrap(),
        "-o",
        out.to_str().unwrap(),
        "--bbox",
        "-10,40,10,55",
        "--time",
        "1",
        "--layer",
        "850-300",
        "--stride",
        "2",
        "-q",
    ]);
    assert_eq!(
        listing(out),
        ["box_20260114T060000Z_hodograph.svg", "box_20260114T060000Z_map_850-300hPa.svg"]
    );
    let text = picture(&out.join("box_20260114T060000Z_map_850-300hPa.svg"));
    let doc = Document::parse(&text).unwrap();
    let root = doc.root_element();
    assert_eq!(root.attribute("data-stride"), Some("2"));
    assert_eq!((num(&root, "data-bottom-hpa"), num(&root, "data-top-hpa")), (850.0, 300.0));
    // Every arrow sits on the stride-2 lattice from the box's south-west cell (40°N, 10°W).
    for a in with_class(&doc, "g", "arrow") {
        let (lat, lon) = (num(&a, "data-lat"), num(&a, "data-lon"));
        assert_eq!(((lat - 40.0) / 5.0).fract(), 0.0, "{lat}");
        assert_eq!(((lon + 10.0) / 5.0).fract(), 0.0, "{lon}");
    }
}

#[test]
fn a_box_across_the_antimeridian_is_drawn_continuous() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path();
    ok(&[
        "plot",
        fixture("antimeridian_360day.nc").to_str().unwrap(),
        "--out",
        out.to_str().unwrap(),
        "--bbox",
        "170,-40,-160,-10",
        "--layer",
        "1000-500",
        "-q",
    ]);
    let names = listing(out);
    assert_eq!(names.len(), 2, "{names:?}");
    let map = names.iter().find(|n| n.contains("_map_")).unwrap();
    // The 360-day calendar's February 30 is a valid time of the file.
    assert!(map.starts_with("box_20260230T060000Z"), "{map}");
    let text = picture(&out.join(map));
    let doc = Document::parse(&text).unwrap();
    assert_eq!(doc.root_element().attribute("data-bbox"), Some("168.75,-41.25,201.25,-8.75"));
    let lons: Vec<f64> =
        with_class(&doc, "g", "arrow").iter().map(|a| num(a, "data-lon")).collect();
    assert!(lons.iter().any(|&l| l > 180.0), "{lons:?}");
}

#[test]
fn bad_requests_fail_clearly_and_write_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let out = dir.path().join("out");
    let o = out.to_str().unwrap();
    let tidy = fixture("tidy_nc4.nc");
    let t = tidy.to_str().unwrap();
    let only_t = fixture("temperature_only.nc");
    let regions = dir.path().join("bad_regions.txt");
    std::fs::write(&regions, "far 100,-10,120,0\n").unwrap();
    for (args, words) in [
        (vec!["plot", t, "--out", o, "--bbox", "1,2,3"], vec!["--bbox", "four comma-separated"]),
        (vec!["plot", t, "--out", o, "--bbox", "100,0,120,10"], vec!["box", "latitudes 20..70"]),
        (vec!["plot", t, "--out", o, "--bbox", "0,40,10,50", "--layer", "1000-550"], vec!["550"]),
        (
            vec!["plot", t, "--out", o, "--bbox", "0,40,10,50", "--layer", "500-1000"],
            vec!["higher pressure"],
        ),
        (
            vec!["plot", t, "--out", o, "--bbox", "0,40,10,50", "--time", "7"],
            vec!["3 step(s)", "0 to 2"],
        ),
        (
            vec!["plot", t, "--out", o, "--bbox", "0,40,10,50", "--time", "2030-01-01"],
            vec!["2030-01-01"],
        ),
        (
            vec!["plot", t, "--out", o, "--bbox", "0,40,10,50", "--time", "soon"],
            vec!["--time", "latest, all"],
        ),
        (vec!["plot", t, "--out", o, "--bbox", "0,40,10,50", "--stride", "0"], vec!["--stride"]),
        (vec!["plot", t, "--out", o, "--regions", regions.to_str().unwrap()], vec!["region far"]),
        (vec!["plot", t, "--out", o], vec!["--bbox", "--regions"]),
        (
            vec!["plot", only_t.to_str().unwrap(), "--out", o, "--bbox", "0,40,10,50"],
            vec!["no geopotential", "--var geopotential=NAME"],
        ),
        (vec!["plot", "/nonexistent/file.nc", "--out", o, "--bbox", "0,40,10,50"], vec!["file.nc"]),
    ] {
        let err = fails(&args);
        for w in words {
            assert!(err.contains(w), "{args:?}: {err:?} lacks {w:?}");
        }
        assert!(!out.exists() || listing(&out).is_empty(), "{args:?} wrote {:?}", listing(&out));
    }
}
