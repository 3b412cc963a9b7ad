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

use std::path::PathBuf;

use serde_json::Value;
use shearbox_cf::{Dataset, Role, TimeSelector, VarOverrides};
use shearbox_core::{BBox, Config};
use shearbox_server::query::{self, ProfileRequest};

mod common;

use common::root;

/// Absolute tolerance for a field, by its unit suffix.
fn abs_tol(key: &str) -> f64 {
    if key.ends_with("_s2") {
        1e-12
    } else if key.ends_with("_per_day") {
        1e-4
    } else if key.ends_with("_ms") {
        // Heights near 10 km are stored in f32 with a spacing of ~1e-3 m; a centred difference
        // over 5° of latitude turns that into ~2e-9 of slope, times g0/f ≈ 7.5e5 s at 5°:
        // ~1.5e-3 m/s of noise in the weakest-Coriolis rows.
        2e-3
    } else {
        1e-4
    }
}

/// Relative tolerance. Quantities built from horizontal derivatives of thickness or layer-mean
/// temperature carry the f32 quantisation of the inputs divided by the small neighbour
/// differences of weak-gradient layers (~0.3 m of thickness change across a stencil above
/// 250 hPa against ~1e-3 m of f32 spacing): up to ~2e-3 relative.
fn rel_tol(key: &str) -> f64 {
    if key.ends_with("_s2") || key == "balance_ratio" || key.ends_with("_per_day") {
        2e-3
    } else {
        1e-4
    }
}

fn number(v: &Value, key: &str) -> Option<f64> {
    v.get(key).and_then(Value::as_f64)
}

fn compare(path: &str, key: &str, got: &Value, want: &Value, problems: &mut Vec<String>) {
    match (got, want) {
        (Value::Object(g), Value::Object(w)) => {
            for (k, wv) in w {
                let Some(gv) = g.get(k) else {
                    problems.push(format!("{path}.{k}: missing in the Rust document"));
                    continue;
                };
                if k == "direction_deg" {
                    // The direction of a short vector is as uncertain as its components:
                    // allow the angle the component tolerance subtends.
                    let speed = number(want, "speed_ms").unwrap_or(0.0);
                    let tol = (abs_tol("_ms") / speed.max(1e-12)).atan().to_degrees().max(1e-2);
                    let (a, b) = (gv.as_f64().unwrap(), wv.as_f64().unwrap());
                    let d = (a - b).rem_euclid(360.0);
                    if d.min(360.0 - d) > tol {
                        problems.push(format!("{path}.{k}: rust {a} vs numpy {b} (±{tol:.3}°)"));
                    }
                    continue;
                }
                compare(&format!("{path}.{k}"), k, gv, wv, problems);
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
            let integer = key.ends_with("cells")
                || ["equator", "pole", "missing", "below_ground"].contains(&key);
            if (integer && g != w) || (g - w).abs() > rel_tol(key) * w.abs() + abs_tol(key) {
                problems.push(format!("{path}: rust {g} vs numpy {w}"));
            }
        }
        (g, w) if g == w => {}
        (g, w) => problems.push(format!("{path}: rust {g} vs numpy {w}")),
    }
}

/// The turning of a layer is the sign of s = u_b v_t − v_b u_t of the box-mean geostrophic
/// winds; where |s| is below the rounding of those winds either sign is right.
fn turning_is_marginal(doc: &Value, layer: &Value) -> bool {
    let level = |p: f64| {
        doc["levels"].as_array().unwrap().iter().find(|l| l["pressure_hpa"].as_f64() == Some(p))
    };
    let (Some(b), Some(t)) =
        (level(layer["bottom_hpa"].as_f64().unwrap()), level(layer["top_hpa"].as_f64().unwrap()))
    else {
        return false;
    };
    let (gb, gt) = (&b["geostrophic_wind"], &t["geostrophic_wind"]);
    let (Some(ub), Some(vb), Some(ut), Some(vt)) =
        (number(gb, "u_ms"), number(gb, "v_ms"), number(gt, "u_ms"), number(gt, "v_ms"))
    else {
        return false;
    };
    let s = ub * vt - vb * ut;
    let noise = abs_tol("_ms") * (ub.hypot(vb) + ut.hypot(vt));
    s.abs() <= noise
}

#[test]
fn profiles_equal_the_numpy_reference() {
    let cases_text = std::fs::read_to_string(root().join("tests/reference/cases.json")).unwrap();
    let cases: Vec<Value> = serde_json::from_str(&cases_text).unwrap();
    assert!(cases.len() >= 10, "the reference covers every fixture");
    let mut problems = Vec::new();
    for case in &cases {
        let name = case["name"].as_str().unwrap();
        // SHEARBOX_GOLDEN_DIR points at freshly generated documents instead of the committed ones.
        let golden_dir = std::env::var_os("SHEARBOX_GOLDEN_DIR")
            .map_or_else(|| root().join("tests/golden"), PathBuf::from);
        let golden_path = golden_dir.join(format!("{name}.json"));
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
        let mut got = serde_json::to_value(&doc).unwrap();
        let golden_layers = golden["layers"].as_array().cloned().unwrap_or_default();
        if let Some(layers) = got["layers"].as_array_mut() {
            for (g, w) in layers.iter_mut().zip(&golden_layers) {
                if turning_is_marginal(&golden, w) {
                    g["turning"] = w["turning"].clone();
                }
            }
        }
        compare(name, "", &got, &golden, &mut problems);
    }
    assert!(problems.is_empty(), "{} differences:\n{}", problems.len(), problems.join("\n"));
}
