//! Units: which spellings are accepted for each role and what conversion they call for.
//!
//! Spellings are compared after [`canonical`]: lower case with white space, `*`, `^` and `.`
//! removed, so `"m**2 s**-2"`, `"m^2 s^-2"`, `"m2 s-2"` and `"m2.s-2"` are all `"m2s-2"`.

use crate::Role;

/// Standard gravity g0 (m s⁻²) used to turn geopotential into geopotential height.
pub const G0: f64 = 9.80665;

/// A conversion applied after unpacking.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) enum Conv {
    /// Values are already in the kernel's units.
    None,
    /// `x / d`.
    Div(f64),
    /// `x * m`.
    Mul(f64),
    /// `x + a`.
    Add(f64),
}

impl Conv {
    pub(crate) fn apply(self, x: f64) -> f64 {
        match self {
            Conv::None => x,
            Conv::Div(d) => x / d,
            Conv::Mul(m) => x * m,
            Conv::Add(a) => x + a,
        }
    }
}

/// The canonical spelling used for comparisons.
pub(crate) fn canonical(units: &str) -> String {
    units
        .trim()
        .to_lowercase()
        .chars()
        .filter(|c| !c.is_whitespace() && !matches!(c, '*' | '^' | '.'))
        .collect()
}

/// Pressure: `(factor to Pa, name)`.
pub(crate) fn pressure(units: &str) -> Option<(f64, &'static str)> {
    match canonical(units).as_str() {
        "pa" | "pascal" | "pascals" => Some((1.0, "Pa")),
        "hpa" | "hectopascal" | "hectopascals" | "mbar" | "mbars" | "millibar" | "millibars"
        | "mb" => Some((100.0, "hPa")),
        "kpa" | "kilopascal" | "kilopascals" => Some((1000.0, "kPa")),
        _ => None,
    }
}

/// Accepted pressure units, in words.
pub(crate) const PRESSURE_ACCEPTED: &str = "Pa, hPa, mbar, millibar(s), mb, kPa";

/// Whether units are a latitude's (`degrees_north` and variants, or plain degrees).
pub(crate) fn is_lat_units(units: &str) -> bool {
    matches!(
        canonical(units).as_str(),
        "degrees_north" | "degree_north" | "degrees_n" | "degree_n" | "degreesn" | "degreen"
    )
}

/// Whether units are a longitude's.
pub(crate) fn is_lon_units(units: &str) -> bool {
    matches!(
        canonical(units).as_str(),
        "degrees_east" | "degree_east" | "degrees_e" | "degree_e" | "degreese" | "degreee"
    )
}

/// Whether units are acceptable for a horizontal coordinate (`""` = absent is accepted).
pub(crate) fn is_degrees(units: &str, role: Role) -> bool {
    let c = canonical(units);
    matches!(c.as_str(), "" | "degrees" | "degree" | "deg")
        || if role == Role::Latitude { is_lat_units(units) } else { is_lon_units(units) }
}

/// The conversion for a field and its description, or `None` when the units are not
/// accepted for the role. `standard_name` decides when the units attribute is absent for
/// geopotential, where the two standard names imply the units.
pub(crate) fn field_conversion(
    role: Role,
    units: &str,
    standard_name: Option<&str>,
) -> Option<(Conv, String)> {
    let c = canonical(units);
    let none = || Some((Conv::None, "none".to_string()));
    match role {
        Role::Geopotential | Role::SurfaceGeopotential => {
            let c = if c.is_empty() {
                match standard_name {
                    Some("geopotential" | "surface_geopotential") => "m2s-2".to_string(),
                    Some(
                        "geopotential_height" | "surface_altitude" | "surface_geopotential_height",
                    ) => "m".to_string(),
                    _ => return None,
                }
            } else {
                c
            };
            match c.as_str() {
                "m2s-2" | "m2/s2" | "m2/s-2" | "jkg-1" | "j/kg" | "m2s-2geopotential" => {
                    Some((Conv::Div(G0), format!("geopotential / {G0} -> gpm")))
                }
                "m" | "gpm" | "meter" | "meters" | "metre" | "metres" | "geopotentialmeter"
                | "geopotentialmeters" | "geopotentialmetre" | "geopotentialmetres" | "gpmeter"
                | "gpmeters" | "m(gpm)" => none(),
                "dam" | "gpdam" | "decameter" | "decameters" | "decametre" | "decametres" => {
                    Some((Conv::Mul(10.0), "dam * 10 -> gpm".to_string()))
                }
                _ => None,
            }
        }
        Role::Temperature => match c.as_str() {
            "k" | "kelvin" | "kelvins" | "degk" | "deg_k" | "degreek" | "degreesk" | "degree_k"
            | "degrees_k" | "degree_kelvin" | "degrees_kelvin" => none(),
            "degc" | "deg_c" | "degreec" | "degreesc" | "degree_c" | "degrees_c" | "celsius"
            | "degree_celsius" | "degrees_celsius" | "°c" | "c" => {
                Some((Conv::Add(273.15), "degC + 273.15 -> K".to_string()))
            }
            _ => None,
        },
        Role::EastwardWind | Role::NorthwardWind => match c.as_str() {
            "m/s" | "ms-1" | "m/sec" | "meter/second" | "meters/second" | "metre/second"
            | "metres/second" | "meterspersecond" | "metrespersecond" | "mps" => none(),
            "km/h" | "kmh-1" | "kph" => Some((Conv::Div(3.6), "km/h / 3.6 -> m/s".to_string())),
            "kt" | "kts" | "knot" | "knots" => {
                Some((Conv::Mul(1852.0 / 3600.0), "knots * 0.514444 -> m/s".to_string()))
            }
            _ => None,
        },
        Role::SpecificHumidity => match c.as_str() {
            "" | "1" | "kg/kg" | "kgkg-1" | "kg/kg-1" | "kgperkg" | "dimensionless" | "-" => none(),
            "g/kg" | "gkg-1" | "gperkg" => {
                Some((Conv::Div(1000.0), "g/kg / 1000 -> kg/kg".to_string()))
            }
            _ => None,
        },
        Role::SurfacePressure => match pressure(units)? {
            (1.0, _) => none(),
            (f, name) => Some((Conv::Mul(f), format!("{name} -> Pa"))),
        },
        _ => None,
    }
}

/// Accepted units per field role, in words.
pub(crate) fn accepted(role: Role) -> &'static str {
    match role {
        Role::Geopotential | Role::SurfaceGeopotential => {
            "geopotential m2 s-2 (also m**2 s**-2, m^2/s^2, J kg-1) or geopotential height m, \
             gpm (also dam)"
        }
        Role::Temperature => "K, kelvin, degK, degC, Celsius, degree_Celsius",
        Role::EastwardWind | Role::NorthwardWind => "m s-1, m/s (also km/h, knots)",
        Role::SpecificHumidity => "kg kg-1, kg/kg, 1 (also g/kg)",
        Role::SurfacePressure | Role::Level => PRESSURE_ACCEPTED,
        Role::Latitude => "degrees_north (or degrees)",
        Role::Longitude => "degrees_east (or degrees)",
        Role::Time => "\"<unit> since <date>\"",
    }
}
