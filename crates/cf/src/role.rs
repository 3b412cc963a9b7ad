//! Roles (what a variable means to shearbox), user overrides and the recognition report.

use std::collections::BTreeMap;

use crate::CfError;

/// What a variable means to shearbox: a coordinate or one of the physical fields.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Role {
    /// Latitude coordinate.
    Latitude,
    /// Longitude coordinate.
    Longitude,
    /// Pressure-level coordinate.
    Level,
    /// Time coordinate.
    Time,
    /// Geopotential (m² s⁻²) or geopotential height (gpm) on pressure levels.
    Geopotential,
    /// Air temperature on pressure levels.
    Temperature,
    /// Eastward wind on pressure levels.
    EastwardWind,
    /// Northward wind on pressure levels.
    NorthwardWind,
    /// Specific humidity on pressure levels.
    SpecificHumidity,
    /// Surface air pressure.
    SurfacePressure,
    /// Surface geopotential or surface altitude (orography).
    SurfaceGeopotential,
}

impl Role {
    /// Every role, coordinates first.
    pub const ALL: [Role; 11] = [
        Role::Latitude,
        Role::Longitude,
        Role::Level,
        Role::Time,
        Role::Geopotential,
        Role::Temperature,
        Role::EastwardWind,
        Role::NorthwardWind,
        Role::SpecificHumidity,
        Role::SurfacePressure,
        Role::SurfaceGeopotential,
    ];

    /// The key used on the command line (`--var KEY=NAME`) and in reports: `latitude`,
    /// `longitude`, `level`, `time`, `geopotential`, `temperature`, `u`, `v`, `humidity`,
    /// `surface_pressure`, `surface_geopotential`.
    pub fn key(&self) -> &'static str {
        match self {
            Role::Latitude => "latitude",
            Role::Longitude => "longitude",
            Role::Level => "level",
            Role::Time => "time",
            Role::Geopotential => "geopotential",
            Role::Temperature => "temperature",
            Role::EastwardWind => "u",
            Role::NorthwardWind => "v",
            Role::SpecificHumidity => "humidity",
            Role::SurfacePressure => "surface_pressure",
            Role::SurfaceGeopotential => "surface_geopotential",
        }
    }

    /// The role of a key (exactly as [`Role::key`] spells it).
    pub fn from_key(key: &str) -> Option<Role> {
        Role::ALL.into_iter().find(|r| r.key() == key)
    }

    /// The role in words, for messages.
    pub fn description(&self) -> &'static str {
        match self {
            Role::Latitude => "latitude coordinate",
            Role::Longitude => "longitude coordinate",
            Role::Level => "pressure-level coordinate",
            Role::Time => "time coordinate",
            Role::Geopotential => "geopotential / geopotential height",
            Role::Temperature => "air temperature",
            Role::EastwardWind => "eastward wind (u)",
            Role::NorthwardWind => "northward wind (v)",
            Role::SpecificHumidity => "specific humidity",
            Role::SurfacePressure => "surface pressure",
            Role::SurfaceGeopotential => "surface geopotential / orography",
        }
    }

    /// Whether the role is a coordinate (latitude, longitude, level, time).
    pub fn is_coordinate(&self) -> bool {
        matches!(self, Role::Latitude | Role::Longitude | Role::Level | Role::Time)
    }

    /// Whether the role is a field on pressure levels (as opposed to a surface field).
    pub fn is_3d(&self) -> bool {
        matches!(
            self,
            Role::Geopotential
                | Role::Temperature
                | Role::EastwardWind
                | Role::NorthwardWind
                | Role::SpecificHumidity
        )
    }

    /// CF standard names that identify the role.
    pub fn standard_names(&self) -> &'static [&'static str] {
        match self {
            Role::Latitude => &["latitude", "grid_latitude"],
            Role::Longitude => &["longitude", "grid_longitude"],
            Role::Level => &["air_pressure"],
            Role::Time => &["time"],
            Role::Geopotential => &["geopotential", "geopotential_height"],
            Role::Temperature => &["air_temperature"],
            Role::EastwardWind => &["eastward_wind"],
            Role::NorthwardWind => &["northward_wind"],
            Role::SpecificHumidity => &["specific_humidity"],
            Role::SurfacePressure => &["surface_air_pressure"],
            Role::SurfaceGeopotential => &[
                "surface_geopotential",
                "surface_altitude",
                "surface_geopotential_height",
                "geopotential",
            ],
        }
    }

    /// Common short names (compared case-insensitively), in order of preference.
    pub fn short_names(&self) -> &'static [&'static str] {
        match self {
            Role::Latitude => &["lat", "latitude", "y", "nav_lat", "lats"],
            Role::Longitude => &["lon", "longitude", "x", "nav_lon", "lons"],
            Role::Level => &[
                "level",
                "plev",
                "lev",
                "isobaricinhpa",
                "pressure",
                "pressure_level",
                "pres",
                "p",
            ],
            Role::Time => &["time", "valid_time"],
            Role::Geopotential => {
                &["z", "zg", "hgt", "gh", "geopotential", "phi", "geopt", "height"]
            }
            Role::Temperature => &["t", "ta", "air", "temp", "temperature", "tmp"],
            Role::EastwardWind => &["u", "ua", "uwnd", "ugrd", "u_wind"],
            Role::NorthwardWind => &["v", "va", "vwnd", "vgrd", "v_wind"],
            Role::SpecificHumidity => &["q", "hus", "shum", "spfh", "specific_humidity"],
            Role::SurfacePressure => &["sp", "ps", "pres", "psfc", "surface_pressure", "pressfc"],
            Role::SurfaceGeopotential => {
                &["zs", "orog", "hgts", "phis", "z_sfc", "surface_geopotential", "hgtsfc", "topo"]
            }
        }
    }

    /// What recognition tries for this role, in words, for messages.
    pub fn tried(&self) -> String {
        let by_units = match self {
            Role::Latitude => "units degrees_north, axis Y; ",
            Role::Longitude => "units degrees_east, axis X; ",
            Role::Level => "axis Z or positive with pressure units; ",
            Role::Time => "axis T or units \"... since ...\"; ",
            _ => "",
        };
        format!(
            "standard_name {}; {}names {}",
            self.standard_names().join("/"),
            by_units,
            self.short_names().join(", ")
        )
    }

    /// The keys of every role, comma-separated, for messages.
    pub fn keys_list() -> String {
        Role::ALL.iter().map(Role::key).collect::<Vec<_>>().join(", ")
    }
}

impl std::fmt::Display for Role {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.key())
    }
}

/// User-chosen variable names per role (`--var ROLE=NAME`), which take precedence over
/// recognition.
#[derive(Default, Clone, Debug, PartialEq, Eq)]
pub struct VarOverrides {
    names: BTreeMap<Role, String>,
}

impl VarOverrides {
    /// No overrides.
    pub fn new() -> Self {
        Self::default()
    }

    /// Parses and records one `ROLE=NAME` argument (for example `temperature=ta`). The role
    /// is one of the keys of [`Role::key`].
    pub fn parse_arg(&mut self, arg: &str) -> Result<(), CfError> {
        let bad = |reason: String| CfError::BadOverride { arg: arg.to_string(), reason };
        let (key, name) =
            arg.split_once('=').ok_or_else(|| bad("there is no '=' in it".to_string()))?;
        let role = Role::from_key(key.trim())
            .ok_or_else(|| bad(format!("{:?} is not a role", key.trim())))?;
        let name = name.trim();
        if name.is_empty() {
            return Err(bad("the variable name is empty".to_string()));
        }
        self.set(role, name.to_string());
        Ok(())
    }

    /// Names the variable for a role, replacing any earlier choice.
    pub fn set(&mut self, role: Role, name: String) {
        self.names.insert(role, name);
    }

    /// The variable named for a role, if any.
    pub fn get(&self, role: Role) -> Option<&str> {
        self.names.get(&role).map(String::as_str)
    }

    /// Every override, by role.
    pub fn iter(&self) -> impl Iterator<Item = (Role, &str)> {
        self.names.iter().map(|(r, n)| (*r, n.as_str()))
    }

    /// Whether no override is set.
    pub fn is_empty(&self) -> bool {
        self.names.is_empty()
    }
}

/// How one role was recognised: which variable, its units as in the file, the conversion
/// applied on reading and what matched.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Recognised {
    /// The role.
    pub role: Role,
    /// The variable's name in the file.
    pub variable: String,
    /// Its `units` attribute as in the file (`""` when absent).
    pub units: String,
    /// The conversion applied on reading, in words (`"none"` when there is none), e.g.
    /// `"geopotential / 9.80665 -> gpm"`, `"degC + 273.15 -> K"`, `"hPa -> Pa"`,
    /// `"unpacked int16: x*scale_factor+add_offset"`; several are joined with `"; "`.
    pub conversion: String,
    /// What identified it: `"standard_name"`, `"units/axis"`, `"short name"` or
    /// `"--var override"`.
    pub matched_by: String,
}
