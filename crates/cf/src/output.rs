//! The CF layout of the gridded diagnostics file (`shearbox compute`): which variables, on
//! which dimensions, with which names, units and attributes, and how one time step of the
//! kernel's [`Diagnostics`] becomes their values.
//!
//! Choices, all following the CF Conventions (1.8):
//! - dimensions `time` (unlimited), `layer`, `level`, `nv` (bounds) and the input's latitude
//!   and longitude, named `lat` and `lon`, with the input's values in the input's latitude
//!   order (north to south stays north to south); longitudes in the reader's eastward order,
//!   made strictly increasing where the input wraps at the antimeridian (CF coordinates are
//!   monotonic), so 180, −177.5 is written 180, 182.5;
//! - `time` in `seconds since 1970-01-01 00:00:00` of the input's calendar, one fixed epoch so
//!   that files of different runs (job-array shards) join along time without conversion;
//! - `layer` is a vertical coordinate in hPa at each layer's logarithmic midpoint
//!   √(p_bottom p_top), with `layer_bounds` holding (bottom, top); `layer_bottom` and
//!   `layer_top` repeat the bounds as plain variables for readers that ignore bounds;
//! - SI units for every diagnostic (K m-1, K s-1, s-1, s-2), CF standard names where the
//!   table has one, `long_name` everywhere, `cell_methods = "layer: mean"` on quantities that
//!   are means over the layer, `_FillValue` ([`FILL_F32`]) where a value is undefined;
//! - a diagnostic the inputs cannot give (the balance ratio without temperature, say) is
//!   left out rather than written as all fill values.

use shearbox_core::{Config, Diagnostics, Layer, Levels, MeanTemperatureKind, ThicknessMethod};

use crate::calendar::{self, Calendar, DateTime};
use crate::write::{AttrValue, Header, VarDef, VarType};
use crate::{Dataset, Role};

pub use crate::write::FILL_F32;

/// Units of the output time coordinate (with the input's calendar).
pub const TIME_UNITS: &str = "seconds since 1970-01-01 00:00:00";

/// What goes into the global attributes besides the layout itself.
#[derive(Debug, Clone)]
pub struct Provenance {
    /// The `history` line: when, which command line, which version.
    pub history: String,
    /// The `source` text: the program and its inputs.
    pub source: String,
    /// The `comment`: the caution that goes with every output.
    pub comment: String,
    /// The kernel's constants and masking rules, recorded as global attributes.
    pub config: Config,
    /// Deflate level of the gridded variables, `None` for uncompressed.
    pub deflate: Option<i32>,
}

/// One gridded diagnostic of the layer dimension.
struct LayerVar {
    name: &'static str,
    standard_name: Option<&'static str>,
    long_name: &'static str,
    units: &'static str,
    layer_mean: bool,
    needs_z: bool,
    needs_t: bool,
}

const LAYER_VARS: [LayerVar; 9] = [
    LayerVar {
        name: "thermal_wind_u",
        standard_name: None,
        long_name: "eastward thermal wind (geostrophic wind at the layer top minus at its bottom)",
        units: "m s-1",
        layer_mean: false,
        needs_z: false,
        needs_t: false,
    },
    LayerVar {
        name: "thermal_wind_v",
        standard_name: None,
        long_name: "northward thermal wind (geostrophic wind at the layer top minus at its bottom)",
        units: "m s-1",
        layer_mean: false,
        needs_z: false,
        needs_t: false,
    },
    LayerVar {
        name: "thickness",
        standard_name: Some(
            "atmosphere_layer_thickness_expressed_as_geopotential_height_difference",
        ),
        long_name: "layer thickness",
        units: "m",
        layer_mean: false,
        needs_z: false,
        needs_t: false,
    },
    LayerVar {
        name: "layer_mean_temperature",
        standard_name: None,
        long_name: "layer-mean temperature (trapezoid in log pressure)",
        units: "K",
        layer_mean: true,
        needs_z: false,
        needs_t: false,
    },
    LayerVar {
        name: "temperature_gradient",
        standard_name: None,
        long_name: "magnitude of the isobaric gradient of the layer-mean temperature",
        units: "K m-1",
        layer_mean: true,
        needs_z: false,
        needs_t: false,
    },
    LayerVar {
        name: "baroclinic_torque",
        standard_name: None,
        long_name: "baroclinic torque (g0 / layer-mean temperature) times temperature gradient",
        units: "s-2",
        layer_mean: true,
        needs_z: false,
        needs_t: false,
    },
    LayerVar {
        name: "balance_ratio",
        standard_name: None,
        long_name: "thermal wind balance ratio: rotational torque over baroclinic torque",
        units: "1",
        layer_mean: false,
        needs_z: true,
        needs_t: true,
    },
    LayerVar {
        name: "thermal_advection",
        standard_name: Some("tendency_of_air_temperature_due_to_advection"),
        long_name: "advection of the layer-mean temperature by the layer-mean geostrophic wind",
        units: "K s-1",
        layer_mean: true,
        needs_z: true,
        needs_t: false,
    },
    LayerVar {
        name: "eady_growth_rate",
        standard_name: None,
        long_name: "maximum Eady growth rate 0.3098 |f| |dV/dz| / N",
        units: "s-1",
        layer_mean: false,
        needs_z: false,
        needs_t: true,
    },
];

/// How a dataset's diagnostics are laid out in the output file.
#[derive(Debug, Clone, PartialEq)]
pub struct DiagnosticsLayout {
    lat: Vec<f64>,
    lon: Vec<f64>,
    lat_descending: bool,
    levels_hpa: Vec<f64>,
    layers_hpa: Vec<(f64, f64)>,
    has_z: bool,
    has_t: bool,
    calendar: Calendar,
    thickness_method: &'static str,
    mean_temperature_kind: &'static str,
}

fn kind_text(kind: MeanTemperatureKind) -> &'static str {
    match kind {
        MeanTemperatureKind::Virtual => "virtual temperature",
        MeanTemperatureKind::Dry => "temperature (no humidity in the input)",
        MeanTemperatureKind::FromThickness => {
            "implied by the geopotential thickness (no temperature in the input)"
        }
    }
}

/// The grid's longitudes made strictly increasing (CF coordinate variables must be
/// monotonic): each value is the previous one plus the eastward step modulo 360°, so a
/// regional grid stored as …, 177.5, 180, −177.5, … is written …, 177.5, 180, 182.5, …; a
/// grid already increasing keeps its values.
fn increasing_longitudes(lon: &[f64]) -> Vec<f64> {
    let mut out: Vec<f64> = Vec::with_capacity(lon.len());
    for (i, &x) in lon.iter().enumerate() {
        out.push(match i {
            0 => x,
            _ => out[i - 1] + (x - lon[i - 1]).rem_euclid(360.0),
        });
    }
    out
}

impl DiagnosticsLayout {
    /// The layout of `layers` (from `ds.levels()`) computed from `ds`.
    pub fn new(ds: &Dataset, layers: &[Layer]) -> Self {
        let grid = ds.grid();
        let mut lat = grid.lat().to_vec();
        if ds.latitude_descending() {
            lat.reverse();
        }
        let levels: &Levels = ds.levels();
        let has_z = ds.has(Role::Geopotential);
        let has_t = ds.has(Role::Temperature);
        let method =
            if has_z { ThicknessMethod::Geopotential } else { ThicknessMethod::Temperature };
        let kind = if !has_t {
            MeanTemperatureKind::FromThickness
        } else if ds.has(Role::SpecificHumidity) {
            MeanTemperatureKind::Virtual
        } else {
            MeanTemperatureKind::Dry
        };
        Self {
            lat,
            lon: increasing_longitudes(grid.lon()),
            lat_descending: ds.latitude_descending(),
            levels_hpa: levels.all_hpa(),
            layers_hpa: layers.iter().map(|l| (levels.hpa(l.bottom), levels.hpa(l.top))).collect(),
            has_z,
            has_t,
            calendar: ds.calendar(),
            thickness_method: match method {
                ThicknessMethod::Geopotential => {
                    "geopotential height at the top minus at the bottom"
                }
                ThicknessMethod::Temperature => {
                    "hypsometric: (R_d / g0) times layer-mean temperature times ln(p_bottom / p_top)"
                }
            },
            mean_temperature_kind: kind_text(kind),
        }
    }

    /// Whether two datasets give files that can be joined: same grid, levels, layers,
    /// inputs and calendar.
    pub fn same_as(&self, other: &Self) -> bool {
        self == other
    }

    /// The names of the time-varying variables, in file order.
    pub fn variable_names(&self) -> Vec<&'static str> {
        let mut names: Vec<&'static str> = LAYER_VARS
            .iter()
            .filter(|v| (!v.needs_z || self.has_z) && (!v.needs_t || self.has_t))
            .map(|v| v.name)
            .collect();
        if self.has_z {
            names.extend(["geostrophic_u", "geostrophic_v"]);
        }
        names
    }

    /// The diagnostics the inputs cannot give, with the reason.
    pub fn left_out(&self) -> Vec<(&'static str, &'static str)> {
        let mut out = Vec::new();
        for v in &LAYER_VARS {
            if v.needs_z && !self.has_z {
                out.push((v.name, "needs geopotential"));
            } else if v.needs_t && !self.has_t {
                out.push((v.name, "needs temperature"));
            }
        }
        if !self.has_z {
            out.push(("geostrophic_u", "needs geopotential"));
            out.push(("geostrophic_v", "needs geopotential"));
        }
        out
    }

    /// The output time value (seconds since 1970-01-01 in the input's calendar) of an
    /// instant from [`Dataset::time_instants`].
    pub fn time_value(&self, instant: i128) -> f64 {
        let epoch =
            DateTime { year: 1970, month: 1, day: 1, hour: 0, minute: 0, second: 0, micros: 0 };
        let epoch = calendar::instant(&epoch, self.calendar).unwrap_or(0);
        (instant - epoch) as f64 / 1e6
    }

    /// Grid cells per map.
    pub fn n_cells(&self) -> usize {
        self.lat.len() * self.lon.len()
    }

    /// The number of layers.
    pub fn n_layers(&self) -> usize {
        self.layers_hpa.len()
    }

    /// The file header.
    pub fn header(&self, prov: &Provenance) -> Header {
        let n_layer = self.layers_hpa.len();
        let mut vars = vec![
            VarDef::new("time", &["time"], VarType::F64)
                .attr("standard_name", "time")
                .attr("long_name", "time")
                .attr("units", TIME_UNITS)
                .attr("calendar", self.calendar.cf_name())
                .attr("axis", "T"),
            VarDef::new("lat", &["lat"], VarType::F64)
                .attr("standard_name", "latitude")
                .attr("long_name", "latitude")
                .attr("units", "degrees_north")
                .attr("axis", "Y")
                .values(self.lat.clone()),
            VarDef::new("lon", &["lon"], VarType::F64)
                .attr("standard_name", "longitude")
                .attr("long_name", "longitude")
                .attr("units", "degrees_east")
                .attr("axis", "X")
                .values(self.lon.clone()),
            VarDef::new("level", &["level"], VarType::F64)
                .attr("standard_name", "air_pressure")
                .attr("long_name", "pressure level")
                .attr("units", "hPa")
                .attr("positive", "down")
                .attr("axis", "Z")
                .values(self.levels_hpa.clone()),
            VarDef::new("layer", &["layer"], VarType::F64)
                .attr("standard_name", "air_pressure")
                .attr("long_name", "pressure at the layer's logarithmic midpoint")
                .attr("units", "hPa")
                .attr("positive", "down")
                .attr("bounds", "layer_bounds")
                .values(self.layers_hpa.iter().map(|(b, t)| (b * t).sqrt()).collect()),
            VarDef::new("layer_bounds", &["layer", "nv"], VarType::F64)
                .values(self.layers_hpa.iter().flat_map(|(b, t)| [*b, *t]).collect()),
            VarDef::new("layer_bottom", &["layer"], VarType::F64)
                .attr("standard_name", "air_pressure")
                .attr("long_name", "pressure at the bottom of the layer")
                .attr("units", "hPa")
                .values(self.layers_hpa.iter().map(|(b, _)| *b).collect()),
            VarDef::new("layer_top", &["layer"], VarType::F64)
                .attr("standard_name", "air_pressure")
                .attr("long_name", "pressure at the top of the layer")
                .attr("units", "hPa")
                .values(self.layers_hpa.iter().map(|(_, t)| *t).collect()),
        ];
        let dims4 = ["time", "layer", "lat", "lon"];
        for v in
            LAYER_VARS.iter().filter(|v| (!v.needs_z || self.has_z) && (!v.needs_t || self.has_t))
        {
            let mut def = VarDef::new(v.name, &dims4, VarType::F32);
            if let Some(sn) = v.standard_name {
                def = def.attr("standard_name", sn);
            }
            def = def.attr("long_name", v.long_name).attr("units", v.units);
            if v.layer_mean {
                def = def.attr("cell_methods", "layer: mean");
            }
            match v.name {
                "thickness" => def = def.attr("comment", self.thickness_method),
                "layer_mean_temperature" => def = def.attr("comment", self.mean_temperature_kind),
                _ => {}
            }
            vars.push(def);
        }
        if self.has_z {
            for (name, sn, ln) in [
                ("geostrophic_u", "geostrophic_eastward_wind", "eastward geostrophic wind"),
                ("geostrophic_v", "geostrophic_northward_wind", "northward geostrophic wind"),
            ] {
                vars.push(
                    VarDef::new(name, &["time", "level", "lat", "lon"], VarType::F32)
                        .attr("standard_name", sn)
                        .attr("long_name", ln)
                        .attr("units", "m s-1"),
                );
            }
        }
        let c = &prov.config.constants;
        let global_attrs: Vec<(String, AttrValue)> = [
            ("Conventions", AttrValue::from("CF-1.8")),
            ("title", "Thermal wind, thickness and baroclinicity on pressure layers".into()),
            ("source", prov.source.clone().into()),
            ("history", prov.history.clone().into()),
            ("comment", prov.comment.clone().into()),
            ("constant_g0_m_per_s2", c.g0.into()),
            ("constant_earth_rotation_rate_per_s", c.omega.into()),
            ("constant_earth_radius_m", c.radius.into()),
            ("constant_gas_constant_dry_air_J_per_kg_K", c.r_dry.into()),
            ("constant_heat_capacity_dry_air_J_per_kg_K", c.cp_dry.into()),
            ("constant_virtual_temperature_factor", c.virtual_factor.into()),
            ("constant_reference_pressure_Pa", c.p_ref.into()),
            ("equatorial_band_half_width_degrees", prov.config.equator_band_deg.into()),
        ]
        .into_iter()
        .map(|(n, v)| (n.to_string(), v))
        .collect();
        Header {
            time_dim: "time".into(),
            dims: vec![
                ("layer".into(), n_layer),
                ("level".into(), self.levels_hpa.len()),
                ("nv".into(), 2),
                ("lat".into(), self.lat.len()),
                ("lon".into(), self.lon.len()),
            ],
            vars,
            global_attrs,
            deflate: prov.deflate,
        }
    }

    /// One time step of every time-varying variable, in the file's latitude order, ready
    /// for [`crate::write::OutputFile::write_step`].
    ///
    /// # Panics
    /// If `diag` was not computed for this layout's grid and layers.
    pub fn step_values(&self, diag: &Diagnostics) -> Vec<(String, Vec<f32>)> {
        let mut values = Vec::new();
        self.step_values_into(diag, &mut values);
        values
    }

    /// [`Self::step_values`] into the buffers of `values` (for example those
    /// [`crate::write::OutputFile::write_step_returning`] gave back), which are reused where
    /// they hold the same variables in the same order and replaced otherwise.
    ///
    /// # Panics
    /// As [`Self::step_values`].
    pub fn step_values_into(&self, diag: &Diagnostics, values: &mut Vec<(String, Vec<f32>)>) {
        assert_eq!(diag.layers.len(), self.layers_hpa.len(), "diagnostics of other layers");
        let n_lon = self.lon.len();
        let n_cells = self.n_cells();
        let append = |out: &mut Vec<f32>, a: &ndarray::Array2<f32>| {
            assert_eq!(a.len(), n_cells, "diagnostics of another grid");
            if self.lat_descending {
                for row in a.outer_iter().rev() {
                    out.extend(row.iter());
                }
            } else if let Some(s) = a.as_slice() {
                out.extend_from_slice(s);
            } else {
                out.extend(a.iter());
            }
            debug_assert_eq!(out.len() % n_lon, 0);
        };
        let names = self.variable_names();
        let reusable = values.len() == names.len()
            && values.iter().zip(&names).all(|((have, _), want)| have == *want);
        if !reusable {
            values.clear();
        }
        let mut old = std::mem::take(values).into_iter();
        for name in names {
            let mut out = old.next().map(|(_, v)| v).unwrap_or_default();
            out.clear();
            out.reserve(n_cells * diag.layers.len().max(diag.levels.len()));
            if name.starts_with("geostrophic_") {
                for lv in &diag.levels {
                    append(
                        &mut out,
                        if name == "geostrophic_u" { &lv.geostrophic_u } else { &lv.geostrophic_v },
                    );
                }
            } else {
                for l in &diag.layers {
                    let a = match name {
                        "thermal_wind_u" => Some(&l.thermal_wind_u),
                        "thermal_wind_v" => Some(&l.thermal_wind_v),
                        "thickness" => Some(&l.thickness),
                        "layer_mean_temperature" => Some(&l.mean_temperature),
                        "temperature_gradient" => Some(&l.temperature_gradient),
                        "baroclinic_torque" => Some(&l.baroclinic_torque),
                        "balance_ratio" => l.balance_ratio.as_ref(),
                        "thermal_advection" => l.thermal_advection.as_ref(),
                        "eady_growth_rate" => l.eady_growth_rate.as_ref(),
                        _ => None,
                    };
                    let a = a.unwrap_or_else(|| panic!("the kernel did not give {name}"));
                    append(&mut out, a);
                }
            }
            values.push((name.to_string(), out));
        }
    }
}
