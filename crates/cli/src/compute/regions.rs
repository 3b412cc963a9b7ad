//! Named boxes of a batch run and their per-time box-mean profiles, written beside the
//! NetCDF output as CSV (one file for layers, one for levels) and JSON lines (one profile
//! document per region and time, the document of `shearbox profile` with a `region` field).
//!
//! A regions file holds one box per line, `NAME W,S,E,N` (degrees, GeoJSON order; west >
//! east crosses the antimeridian); blank lines and lines starting with `#` are ignored.

use std::io::Write;
use std::path::Path;

use anyhow::{Context, Result, bail};
use shearbox_core::{BBox, Grid};
use shearbox_server::wire::{LayerDoc, LevelDoc, ProfileDoc, WireVector};

/// A named box.
#[derive(Debug, Clone, PartialEq)]
pub struct Region {
    /// Its name (letters, digits, `_`, `-`, `.`).
    pub name: String,
    /// The box.
    pub bbox: BBox,
}

fn valid_name(name: &str) -> bool {
    !name.is_empty() && name.chars().all(|c| c.is_ascii_alphanumeric() || "_-.".contains(c))
}

/// Parses the text of a regions file (`source` names it in errors).
pub fn parse(text: &str, source: &str) -> Result<Vec<Region>> {
    let mut out: Vec<Region> = Vec::new();
    for (n, line) in text.lines().enumerate() {
        let line = line.trim();
        if line.is_empty() || line.starts_with('#') {
            continue;
        }
        let at = format!("{source}, line {}", n + 1);
        let Some((name, bbox)) = line.split_once(char::is_whitespace) else {
            bail!("{at}: expected NAME W,S,E,N, got {line:?}");
        };
        if !valid_name(name) {
            bail!("{at}: region name {name:?} may hold only letters, digits, '_', '-' and '.'");
        }
        let bbox = BBox::parse(bbox.trim()).with_context(|| format!("{at}: region {name}"))?;
        if out.iter().any(|r| r.name == name) {
            bail!("{at}: region {name} is named twice");
        }
        out.push(Region { name: name.to_string(), bbox });
    }
    if out.is_empty() {
        bail!("{source}: no region in the file (expected lines NAME W,S,E,N)");
    }
    Ok(out)
}

/// Checks that every region holds at least one cell of `grid`.
pub fn check(regions: &[Region], grid: &Grid) -> Result<()> {
    for r in regions {
        grid.select_box(&r.bbox).with_context(|| format!("region {}", r.name))?;
    }
    Ok(())
}

fn num(x: Option<f64>) -> String {
    x.map(|v| format!("{v}")).unwrap_or_default()
}

fn vector(v: Option<WireVector>) -> [String; 4] {
    match v {
        Some(v) => [v.u_ms, v.v_ms, v.speed_ms, v.direction_deg].map(|x| format!("{x}")),
        None => Default::default(),
    }
}

fn vector_cols(prefix: &str) -> Vec<String> {
    ["u_ms", "v_ms", "speed_ms", "direction_deg"].iter().map(|c| format!("{prefix}_{c}")).collect()
}

/// The header of the layers CSV.
pub fn layer_header() -> String {
    let mut cols: Vec<String> = [
        "region",
        "time",
        "bottom_hpa",
        "top_hpa",
        "thickness_m",
        "thickness_method",
        "thickness_from_temperature_m",
        "mean_temperature_k",
        "mean_temperature_kind",
    ]
    .map(String::from)
    .to_vec();
    cols.extend(vector_cols("thermal_wind"));
    cols.extend(
        [
            "temperature_gradient_k_per_100km",
            "baroclinic_torque_s2",
            "rotational_torque_s2",
            "balance_ratio",
            "thermal_advection_k_per_day",
            "turning",
            "n_squared_s2",
            "eady_growth_rate_per_day",
        ]
        .map(String::from),
    );
    cols.extend(vector_cols("observed_shear"));
    cols.extend(vector_cols("ageostrophic_shear"));
    cols.extend(
        ["valid_cells", "masked_equator", "masked_pole", "masked_missing", "masked_below_ground"]
            .map(String::from),
    );
    cols.join(",")
}

fn layer_row(region: &str, time: &str, l: &LayerDoc) -> String {
    let mut cells = vec![
        region.to_string(),
        time.to_string(),
        format!("{}", l.bottom_hpa),
        format!("{}", l.top_hpa),
        num(l.thickness_m),
        l.thickness_method.clone(),
        num(l.thickness_from_temperature_m),
        num(l.mean_temperature_k),
        l.mean_temperature_kind.clone(),
    ];
    cells.extend(vector(l.thermal_wind));
    cells.extend([
        num(l.temperature_gradient_k_per_100km),
        num(l.baroclinic_torque_s2),
        num(l.rotational_torque_s2),
        num(l.balance_ratio),
        num(l.thermal_advection_k_per_day),
        l.turning.clone().unwrap_or_default(),
        num(l.n_squared_s2),
        num(l.eady_growth_rate_per_day),
    ]);
    cells.extend(vector(l.observed_shear));
    cells.extend(vector(l.ageostrophic_shear));
    cells.extend(
        [l.valid_cells, l.masked.equator, l.masked.pole, l.masked.missing, l.masked.below_ground]
            .map(|n| n.to_string()),
    );
    cells.join(",")
}

/// The header of the levels CSV.
pub fn level_header() -> String {
    let mut cols: Vec<String> =
        ["region", "time", "pressure_hpa", "geopotential_height_m", "temperature_k"]
            .map(String::from)
            .to_vec();
    cols.extend(vector_cols("geostrophic_wind"));
    cols.extend(vector_cols("wind"));
    cols.push("valid_cells".into());
    cols.join(",")
}

fn level_row(region: &str, time: &str, l: &LevelDoc) -> String {
    let mut cells = vec![
        region.to_string(),
        time.to_string(),
        format!("{}", l.pressure_hpa),
        num(l.geopotential_height_m),
        num(l.temperature_k),
    ];
    cells.extend(vector(l.geostrophic_wind));
    cells.extend(vector(l.wind));
    cells.push(l.valid_cells.to_string());
    cells.join(",")
}

/// The three side files of a run, open for appending one time step after another.
pub struct SideWriters {
    layers: std::io::BufWriter<std::fs::File>,
    levels: std::io::BufWriter<std::fs::File>,
    profiles: std::io::BufWriter<std::fs::File>,
}

impl SideWriters {
    /// Creates the three files (temporary names) and writes the CSV headers.
    pub fn create(layers: &Path, levels: &Path, profiles: &Path) -> Result<Self> {
        let open = |p: &Path| -> Result<std::io::BufWriter<std::fs::File>> {
            Ok(std::io::BufWriter::new(
                std::fs::File::create(p).with_context(|| format!("creating {}", p.display()))?,
            ))
        };
        let mut w =
            Self { layers: open(layers)?, levels: open(levels)?, profiles: open(profiles)? };
        writeln!(w.layers, "{}", layer_header())?;
        writeln!(w.levels, "{}", level_header())?;
        Ok(w)
    }

    /// Appends one region's profile at one time.
    pub fn append(&mut self, region: &str, doc: &ProfileDoc) -> Result<()> {
        for l in &doc.layers {
            writeln!(self.layers, "{}", layer_row(region, &doc.time, l))?;
        }
        for l in &doc.levels {
            writeln!(self.levels, "{}", level_row(region, &doc.time, l))?;
        }
        let body = serde_json::to_string(doc)?;
        // The document is an object: put the region first.
        let rest = body.strip_prefix('{').context("a profile document is a JSON object")?;
        writeln!(self.profiles, "{{\"region\":{},{rest}", serde_json::to_string(region)?)?;
        Ok(())
    }

    /// Flushes everything to disk.
    pub fn finish(self) -> Result<()> {
        for mut w in [self.layers, self.levels, self.profiles] {
            w.flush()?;
            w.get_ref().sync_all()?;
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn regions_parse_and_bad_lines_say_where() {
        let r =
            parse("# boxes\nserrin -30,42,-10,56\n\n  gap_2 170,-10,-170,10\n", "r.txt").unwrap();
        assert_eq!(r.len(), 2);
        assert_eq!(r[1].name, "gap_2");
        assert!(r[1].bbox.west > r[1].bbox.east);
        for (text, needle) in [
            ("a", "line 1: expected NAME"),
            ("a 1,2,3", "line 1: region a"),
            ("a 0,0,1,1\na 0,0,1,1", "line 2: region a is named twice"),
            ("a/b 0,0,1,1", "may hold only"),
            ("# nothing", "no region"),
        ] {
            let err = format!("{:#}", parse(text, "r.txt").unwrap_err());
            assert!(err.contains(needle), "{text:?}: {err}");
        }
    }

    #[test]
    fn csv_rows_have_as_many_cells_as_the_header() {
        let layer = LayerDoc {
            bottom_hpa: 1000.0,
            top_hpa: 500.0,
            thickness_m: Some(5400.0),
            thickness_method: "geopotential".into(),
            thickness_from_temperature_m: None,
            mean_temperature_k: Some(260.0),
            mean_temperature_kind: "dry".into(),
            thermal_wind: None,
            temperature_gradient_k_per_100km: Some(1.0),
            baroclinic_torque_s2: None,
            rotational_torque_s2: None,
            balance_ratio: None,
            thermal_advection_k_per_day: None,
            turning: Some("veering".into()),
            n_squared_s2: None,
            eady_growth_rate_per_day: None,
            observed_shear: None,
            ageostrophic_shear: None,
            valid_cells: 3,
            masked: shearbox_server::wire::MaskedDoc {
                equator: 0,
                pole: 1,
                missing: 0,
                below_ground: 2,
            },
        };
        let header_cells = layer_header().split(',').count();
        let row = layer_row("a", "2026-01-15T00:00:00Z", &layer);
        assert_eq!(row.split(',').count(), header_cells);
        assert!(row.ends_with(",3,0,1,0,2"), "{row}");
        let level = LevelDoc {
            pressure_hpa: 850.0,
            geopotential_height_m: Some(1450.0),
            temperature_k: None,
            geostrophic_wind: None,
            wind: None,
            valid_cells: 4,
        };
        assert_eq!(
            level_row("a", "t", &level).split(',').count(),
            level_header().split(',').count()
        );
    }
}
