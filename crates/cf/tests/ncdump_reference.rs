//! Decoded times compared with `ncdump -t` (netCDF-C's own calendar code, an implementation
//! independent of this crate), for every calendar, over values from the 16th to the 22nd
//! century, and for the committed fixture files.

mod common;

use std::path::Path;
use std::process::Command;

use common::*;
use shearbox_cf::{Dataset, TimeSelector, VarOverrides};

/// The times `ncdump -t -v time` prints, as canonical ISO strings.
fn ncdump_times(p: &Path, var: &str) -> Result<Vec<String>, Box<dyn std::error::Error>> {
    let out = Command::new("ncdump").arg("-t").arg("-v").arg(var).arg(p).output()?;
    if !out.status.success() {
        return Err(format!("ncdump failed: {}", String::from_utf8_lossy(&out.stderr)).into());
    }
    let text = String::from_utf8(out.stdout)?;
    let data = text.rsplit("\ndata:\n").next().ok_or("no data section")?;
    let mut times = Vec::new();
    for piece in data.split('"').skip(1).step_by(2) {
        match TimeSelector::parse(piece)? {
            TimeSelector::At(iso) => times.push(iso),
            TimeSelector::Latest => return Err("unexpected 'latest'".into()),
        }
    }
    Ok(times)
}

#[test]
fn every_calendar_agrees_with_ncdump() -> TestResult {
    let dir = tmp()?;
    // Hours since 1850-01-01 12:00 over ±250 years, in steps that are not whole days.
    let values: Vec<f64> = (0..40).map(|k| -2_190_000.0 + 109_537.0 * k as f64).collect();
    for cal in ["standard", "proleptic_gregorian", "julian", "noleap", "all_leap", "360_day"] {
        let mut axes = Axes::small();
        axes.time = values.clone();
        let mut cdl = axes.cdl();
        let time = cdl.vars.iter_mut().find(|v| v.name == "time").ok_or("time")?;
        time.attrs = vec![
            ("units".into(), "\"hours since 1850-01-01 12:00:00\"".into()),
            ("calendar".into(), format!("{cal:?}")),
        ];
        let cdl =
            cdl.var(Var::new("t", "float", &["time", "level", "lat", "lon"]).text("units", "K"));
        let cdl = cdl.fill("t", |_| "250".into());
        let p = cdl.write(dir.path(), cal, "nc3")?;
        let ds = Dataset::open(&p, &VarOverrides::default())?;
        let want = ncdump_times(&p, "time")?;
        ensure!(
            ds.times() == want.as_slice(),
            "{cal}:\n ours   {:?}\n ncdump {:?}",
            ds.times(),
            want
        );
    }
    Ok(())
}

#[test]
fn committed_fixtures_agree_with_ncdump() -> TestResult {
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../fixtures");
    let mut n = 0;
    for entry in std::fs::read_dir(&dir)? {
        let p = entry?.path();
        if p.extension().and_then(|e| e.to_str()) != Some("nc") {
            continue;
        }
        let ds = Dataset::open(&p, &VarOverrides::default())?;
        let var = ds.time_variable().ok_or("no time")?;
        let want = ncdump_times(&p, var)?;
        ensure!(ds.times() == want.as_slice(), "{}: {:?} vs {:?}", p.display(), ds.times(), want);
        let f = ds.read_fields(ds.n_steps() - 1, None)?;
        ensure!(f.grid() == ds.grid(), "grid");
        n += 1;
    }
    ensure!(n >= 8, "only {n} fixtures found in {}", dir.display());
    Ok(())
}
