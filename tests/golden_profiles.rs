//! The profile documents of the Rust code against those of the independent numpy reference
//! (`tests/reference/diagnostics.py`, numpy + netCDF4 from PyPI, float64 throughout), kept as
//! golden files in `tests/golden/`. `tests/reference/check_goldens.sh` shows the goldens are
//! current; this test shows the Rust answers equal them.
//!
//! Tolerances: the Rust reader stores inputs as f32 and the kernel's outputs are f32, the
//! reference keeps float64 end to end. A stored height of ~11 000 m has an f32 spacing of
//! 1e-3 m, so differences of neighbouring heights over a 2.5° grid carry ~1e-8 relative
//! error into a derivative; box means then agree to ~1e-5 relative. We allow 1e-4 relative
//! plus a small absolute floor per unit, far below any meteorologically meaningful difference
//! and far above the f32 noise. Counts, strings and null-ness must match exactly.

use std::path::{Path, PathBuf};

use serde_json::Value;
use shearbox_cf::{Dataset, Role, TimeSelector, VarOverrides};
use shearbox_core::{BBox, Config};
use shearbox_server::query::{self, ProfileRequest};

fn root() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../..")
}

/// Absolute tolerance for a field, by its unit suffix.
fn abs_tol(key: &str) -> f64 {
    if key.ends_with("_s2") {
        1e-12
    } else if key.ends_with("_per_day") {
        1e-4
    } else if key == "direction_deg" {
        1e-2
    } else {
        1e-4
    }
}

fn compare(path: &str, key: &str, got: &Value, want: &Value, problems: &mut Vec<String>) {
    match (got, want) {
        (Value::Object(g), Value::Object(w)) => {
            for (k, wv) in w {
                match g.get(k) {
                    Some(gv) => compare(&format!("{path}.{k}"), k, gv, wv, problems),
                    None => problems.push(format!("{path}.{k}: missing in the Rust document")),
                }
            }
        }
        (Value::Array(g), Value::Array(w)) => {
            if g.len() != w.len() {
                problems.push(format!("{path}: {} entries vs {}", g.len(), w.len()));
                return;
            }
            for (n, (gv, wv)) in g.iter().zip(w).enumerate() {
                compare(&format!("{path}[{n}]"), key, gv, wv, problems);
            }
        }
        (Value::Number(g), Value::Number(w)) => {
            let (g, w) = (g.as_f64().unwrap(), w.as_f64().unwrap());
            let tol = if key == "direction_deg" {
                // Directions wrap at 360°.
                let d = (g - w).rem_euclid(360.0);
                if d.min(360.0 - d) <= abs_tol(key) {
                    return;
                }
                0.0
            } else {
                1e-4 * w.abs() + abs_tol(key)
            };
            let integer = key.ends_with("cells")
                || ["equator", "pole", "missing", "below_ground"].contains(&key);
            if (integer && g != w) || (g - w).abs() > tol {
                problems.push(format!("{path}: rust {g} vs numpy {w}"));
            }
        }
        (g, w) if g == w => {}
        (g, w) => problems.push(format!("{path}: rust {g} vs numpy {w}")),
    }
}

#[test]
fn profiles_equal_the_numpy_reference() {
    let cases_text = std::fs::read_to_string(root().join("tests/reference/cases.json")).unwrap();
    let cases: Vec<Value> = serde_json::from_str(&cases_text).unwrap();
    assert!(cases.len() >= 10, "the reference covers every fixture");
    let mut problems = Vec::new();
    for case in &cases {
        let name = case["name"].as_str().unwrap();
        let golden_path = root().join("tests/golden").join(format!("{name}.json"));
        let golden: Value = serde_json::from_str(
            &std::fs::read_to_string(&golden_path)
                .unwrap_or_else(|e| panic!("{}: {e}", golden_path.display())),
        )
        .unwrap();
        let fixture = root().join(case["fixture"].as_str().unwrap());
        let mut overrides = VarOverrides::default();
        for (role, var) in case["overrides"].as_object().unwrap() {
            overrides
                .set(Role::from_key(role).expect("known role"), var.as_str().unwrap().to_string());
        }
        let b: Vec<f64> =
            case["bbox"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
        let layer =
            case["layer"].as_array().map(|l| (l[0].as_f64().unwrap(), l[1].as_f64().unwrap()));
        let request = ProfileRequest {
            bbox: BBox::new(b[0], b[1], b[2], b[3]).unwrap(),
            time: TimeSelector::parse(case["time"].as_str().unwrap()).unwrap(),
            layer,
        };
        let ds = Dataset::open(&fixture, &overrides).unwrap();
        let dataset_name = fixture.file_name().unwrap().to_string_lossy().to_string();
        let doc = query::profile(&dataset_name, &ds, &request, &Config::default())
            .unwrap_or_else(|e| panic!("{name}: {e}"));
        let got = serde_json::to_value(&doc).unwrap();
        compare(name, "", &got, &golden, &mut problems);
    }
    assert!(problems.is_empty(), "{} differences:\n{}", problems.len(), problems.join("\n"));
}
