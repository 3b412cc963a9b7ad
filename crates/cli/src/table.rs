//! Plain-text renderings of the documents, for a person at a terminal.

use std::io::{self, Write};

use shearbox_server::wire::{DatasetDoc, ProfileDoc, WireVector};

fn num(v: Option<f64>, width: usize, decimals: usize) -> String {
    match v {
        Some(x) => format!("{x:>width$.decimals$}"),
        None => format!("{:>width$}", "-"),
    }
}

fn sci(v: Option<f64>, width: usize) -> String {
    match v {
        Some(x) => format!("{x:>width$.2e}"),
        None => format!("{:>width$}", "-"),
    }
}

fn wind(v: Option<WireVector>) -> String {
    match v {
        Some(w) => format!("{:>5.1} m/s {:>3.0}°", w.speed_ms, w.direction_deg),
        None => format!("{:>13}", "-"),
    }
}

/// Writes the profile as two aligned tables, levels and layers, bottom-up.
pub fn write_profile(out: &mut impl Write, doc: &ProfileDoc) -> io::Result<()> {
    let [w, s, e, n] = doc.bbox;
    writeln!(out, "{}  {}  box W {w} S {s} E {e} N {n}", doc.dataset, doc.time)?;
    writeln!(out, "{}", doc.caution)?;
    writeln!(out)?;
    writeln!(
        out,
        "{:>8} {:>9} {:>8} {:>15} {:>15} {:>6}",
        "p hPa", "Z m", "T K", "geostrophic", "observed", "cells"
    )?;
    for l in &doc.levels {
        writeln!(
            out,
            "{:>8.1} {} {} {:>15} {:>15} {:>6}",
            l.pressure_hpa,
            num(l.geopotential_height_m, 9, 1),
            num(l.temperature_k, 8, 2),
            wind(l.geostrophic_wind),
            wind(l.wind),
            l.valid_cells
        )?;
    }
    writeln!(out)?;
    writeln!(
        out,
        "{:>11} {:>8} {:>4} {:>7} {:>15} {:>8} {:>9} {:>6} {:>8} {:>8} {:>6} {:>6} {:>15}",
        "layer hPa",
        "dZ m",
        "by",
        "Tbar K",
        "thermal wind",
        "dT/100k",
        "B s-2",
        "ratio",
        "adv K/d",
        "turning",
        "eady/d",
        "cells",
        "masked e/p/m/g"
    )?;
    for l in &doc.layers {
        let masked = format!(
            "{}/{}/{}/{}",
            l.masked.equator, l.masked.pole, l.masked.missing, l.masked.below_ground
        );
        writeln!(
            out,
            "{:>11} {} {:>4} {} {:>15} {} {} {} {} {:>8} {} {:>6} {:>15}",
            format!("{:.0}-{:.0}", l.bottom_hpa, l.top_hpa),
            num(l.thickness_m, 8, 1),
            if l.thickness_method == "geopotential" { "geo" } else { "temp" },
            num(l.mean_temperature_k, 7, 2),
            wind(l.thermal_wind),
            num(l.temperature_gradient_k_per_100km, 8, 3),
            sci(l.baroclinic_torque_s2, 9),
            num(l.balance_ratio, 6, 3),
            num(l.thermal_advection_k_per_day, 8, 2),
            l.turning.as_deref().unwrap_or("-"),
            num(l.eady_growth_rate_per_day, 6, 2),
            l.valid_cells,
            masked
        )?;
    }
    writeln!(out)?;
    writeln!(out, "masked e/p/m/g: equatorial band / pole rows / missing input / below ground")?;
    Ok(())
}

/// Writes what `inspect` found.
pub fn write_dataset(out: &mut impl Write, doc: &DatasetDoc) -> io::Result<()> {
    let g = &doc.grid;
    writeln!(out, "{} ({})", doc.name, doc.format)?;
    writeln!(out)?;
    writeln!(out, "grid")?;
    writeln!(
        out,
        "  {} latitudes  {} to {} every {:.4}° (file order: {})",
        g.n_lat,
        g.lat_min,
        g.lat_max,
        g.lat_spacing,
        g.lat_order_in_file.replace('_', " ")
    )?;
    writeln!(
        out,
        "  {} longitudes {} to {} every {:.4}° ({})",
        g.n_lon,
        g.lon_first,
        g.lon_last,
        g.lon_spacing,
        if g.periodic { "global, periodic" } else { "regional" }
    )?;
    let levels: Vec<String> = doc.levels_hpa.iter().map(|p| format!("{p}")).collect();
    writeln!(out, "levels (hPa, file units {}): {}", doc.level_units, levels.join(" "))?;
    let t = &doc.times;
    writeln!(
        out,
        "times: {} from {} to {} (calendar {}{})",
        t.count,
        t.first.as_deref().unwrap_or("-"),
        t.last.as_deref().unwrap_or("-"),
        t.calendar,
        t.units.as_deref().map(|u| format!(", units \"{u}\"")).unwrap_or_default()
    )?;
    writeln!(out)?;
    writeln!(out, "variables")?;
    let width = doc.variables.iter().map(|v| v.role.len()).max().unwrap_or(0);
    let vwidth = doc.variables.iter().map(|v| v.variable.len()).max().unwrap_or(0);
    for v in &doc.variables {
        writeln!(
            out,
            "  {:<width$}  {:<vwidth$}  [{}]  {}  (by {})",
            v.role, v.variable, v.units, v.conversion, v.matched_by
        )?;
    }
    writeln!(out)?;
    writeln!(out, "diagnostics")?;
    let width = doc.diagnostics.iter().map(|d| d.name.len()).max().unwrap_or(0);
    for d in &doc.diagnostics {
        let mark = if d.possible { "yes" } else { "no " };
        writeln!(out, "  {:<width$}  {mark}  {}", d.name, d.reason)?;
    }
    Ok(())
}
