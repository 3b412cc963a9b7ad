//! Wire types: the JSON documents of the command line and the service.
//!
//! Field names carry their units (`_hpa`, `_ms`, `_k_per_100km`) so a document read on its own
//! is unambiguous. A quantity that cannot be computed is `null`, never 0 and never NaN.

use serde::{Deserialize, Serialize};
use shearbox_cf::{Capability, Dataset, Recognised};
use shearbox_core::{
    BBox, BoxProfile, LayerMeans, LevelMeans, MeanTemperatureKind, ThicknessMethod, Turning, Vector,
};
use utoipa::ToSchema;

/// Seconds per day, for per-day rates.
const SECONDS_PER_DAY: f64 = 86_400.0;

/// A horizontal vector with its speed and its direction in the wind convention.
#[derive(Debug, Clone, Copy, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct WireVector {
    /// Eastward component, m s⁻¹.
    pub u_ms: f64,
    /// Northward component, m s⁻¹.
    pub v_ms: f64,
    /// Speed, m s⁻¹.
    pub speed_ms: f64,
    /// Degrees clockwise from north of where the vector comes from.
    pub direction_deg: f64,
}

impl From<Vector> for WireVector {
    fn from(v: Vector) -> Self {
        Self { u_ms: v.u, v_ms: v.v, speed_ms: v.speed(), direction_deg: v.direction_deg() }
    }
}

/// Box means at one level.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct LevelDoc {
    /// Pressure, hPa.
    pub pressure_hpa: f64,
    /// Mean geopotential height, gpm.
    pub geopotential_height_m: Option<f64>,
    /// Mean temperature, K.
    pub temperature_k: Option<f64>,
    /// Mean geostrophic wind.
    pub geostrophic_wind: Option<WireVector>,
    /// Mean observed wind.
    pub wind: Option<WireVector>,
    /// Cells of the box where the geostrophic wind is defined.
    pub valid_cells: usize,
}

/// Cells of the box by the reason the thermal wind is undefined there.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize, ToSchema)]
pub struct MaskedDoc {
    /// In the equatorial band.
    pub equator: usize,
    /// On a pole row.
    pub pole: usize,
    /// An input missing at the cell or a stencil neighbour.
    pub missing: usize,
    /// The layer is below ground.
    pub below_ground: usize,
}

/// Box means of one layer.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct LayerDoc {
    /// Bottom pressure, hPa.
    pub bottom_hpa: f64,
    /// Top pressure, hPa.
    pub top_hpa: f64,
    /// Primary thickness, gpm.
    pub thickness_m: Option<f64>,
    /// `"geopotential"` or `"temperature"`.
    pub thickness_method: String,
    /// Hypsometric thickness from temperature, gpm.
    pub thickness_from_temperature_m: Option<f64>,
    /// Layer-mean temperature, K.
    pub mean_temperature_k: Option<f64>,
    /// `"virtual"`, `"dry"` or `"from_thickness"`.
    pub mean_temperature_kind: String,
    /// Mean thermal wind.
    pub thermal_wind: Option<WireVector>,
    /// Mean magnitude of the isobaric temperature gradient, K per 100 km.
    pub temperature_gradient_k_per_100km: Option<f64>,
    /// Mean baroclinic torque, s⁻².
    pub baroclinic_torque_s2: Option<f64>,
    /// Mean rotational torque, s⁻².
    pub rotational_torque_s2: Option<f64>,
    /// Mean balance ratio (rotational over baroclinic torque).
    pub balance_ratio: Option<f64>,
    /// Mean thermal advection, K per day.
    pub thermal_advection_k_per_day: Option<f64>,
    /// `"veering"`, `"backing"` or `"none"`, from the box-mean geostrophic winds.
    pub turning: Option<String>,
    /// Mean static stability N², s⁻².
    pub n_squared_s2: Option<f64>,
    /// Mean Eady growth rate, per day.
    pub eady_growth_rate_per_day: Option<f64>,
    /// Mean observed shear.
    pub observed_shear: Option<WireVector>,
    /// Mean ageostrophic shear.
    pub ageostrophic_shear: Option<WireVector>,
    /// Cells where the thermal wind is defined.
    pub valid_cells: usize,
    /// Cells masked, by reason.
    pub masked: MaskedDoc,
}

/// The profile document of a box at one time.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct ProfileDoc {
    /// Dataset name (the file name for the command line).
    pub dataset: String,
    /// Valid time, ISO 8601.
    pub time: String,
    /// The box, `[west, south, east, north]`.
    #[schema(value_type = Vec<f64>)]
    pub bbox: [f64; 4],
    /// The caution text.
    pub caution: String,
    /// Levels, bottom-up.
    pub levels: Vec<LevelDoc>,
    /// Layers, bottom-up.
    pub layers: Vec<LayerDoc>,
}

impl ProfileDoc {
    /// Converts a kernel profile.
    pub fn new(dataset: &str, time: &str, bbox: &BBox, profile: &BoxProfile) -> Self {
        Self {
            dataset: dataset.to_string(),
            time: time.to_string(),
            bbox: [bbox.west, bbox.south, bbox.east, bbox.north],
            caution: crate::CAUTION.to_string(),
            levels: profile.levels.iter().map(level_doc).collect(),
            layers: profile.layers.iter().map(layer_doc).collect(),
        }
    }
}

fn level_doc(l: &LevelMeans) -> LevelDoc {
    LevelDoc {
        pressure_hpa: l.pressure_pa / 100.0,
        geopotential_height_m: l.geopotential_height,
        temperature_k: l.temperature,
        geostrophic_wind: l.geostrophic_wind.map(WireVector::from),
        wind: l.wind.map(WireVector::from),
        valid_cells: l.valid_cells,
    }
}

fn layer_doc(l: &LayerMeans) -> LayerDoc {
    LayerDoc {
        bottom_hpa: l.bottom_pa / 100.0,
        top_hpa: l.top_pa / 100.0,
        thickness_m: l.thickness,
        thickness_method: match l.thickness_method {
            ThicknessMethod::Geopotential => "geopotential",
            ThicknessMethod::Temperature => "temperature",
        }
        .into(),
        thickness_from_temperature_m: l.thickness_from_temperature,
        mean_temperature_k: l.mean_temperature,
        mean_temperature_kind: match l.mean_temperature_kind {
            MeanTemperatureKind::Virtual => "virtual",
            MeanTemperatureKind::Dry => "dry",
            MeanTemperatureKind::FromThickness => "from_thickness",
        }
        .into(),
        thermal_wind: l.thermal_wind.map(WireVector::from),
        temperature_gradient_k_per_100km: l.temperature_gradient.map(|g| g * 1e5),
        baroclinic_torque_s2: l.baroclinic_torque,
        rotational_torque_s2: l.rotational_torque,
        balance_ratio: l.balance_ratio,
        thermal_advection_k_per_day: l.thermal_advection.map(|a| a * SECONDS_PER_DAY),
        turning: l.turning.map(|t| {
            match t {
                Turning::Veering => "veering",
                Turning::Backing => "backing",
                Turning::None => "none",
            }
            .to_string()
        }),
        n_squared_s2: l.n_squared,
        eady_growth_rate_per_day: l.eady_growth_rate.map(|e| e * SECONDS_PER_DAY),
        observed_shear: l.observed_shear.map(WireVector::from),
        ageostrophic_shear: l.ageostrophic_shear.map(WireVector::from),
        valid_cells: l.counts.valid,
        masked: MaskedDoc {
            equator: l.counts.equator,
            pole: l.counts.pole,
            missing: l.counts.missing,
            below_ground: l.counts.below_ground,
        },
    }
}

/// The horizontal grid as the dataset document describes it.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct GridDoc {
    /// Number of latitudes.
    pub n_lat: usize,
    /// Number of longitudes.
    pub n_lon: usize,
    /// Southernmost latitude, degrees.
    pub lat_min: f64,
    /// Northernmost latitude, degrees.
    pub lat_max: f64,
    /// Mean latitude spacing, degrees.
    pub lat_spacing: f64,
    /// First longitude (westernmost, after normalisation), degrees.
    pub lon_first: f64,
    /// Last longitude (easternmost), degrees.
    pub lon_last: f64,
    /// Mean longitude spacing, degrees.
    pub lon_spacing: f64,
    /// Latitude order in the file: `"south_to_north"` or `"north_to_south"`.
    pub lat_order_in_file: String,
    /// Whether the longitudes cover the full circle.
    pub periodic: bool,
}

/// One recognised variable.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct VariableDoc {
    /// Role key (`temperature`, `geopotential`, …).
    pub role: String,
    /// Variable name in the file.
    pub variable: String,
    /// Units as written in the file.
    pub units: String,
    /// The conversion applied on reading.
    pub conversion: String,
    /// How the variable was recognised.
    pub matched_by: String,
}

/// Whether a diagnostic can be computed from the dataset, and why not.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct DiagnosticDoc {
    /// Diagnostic name.
    pub name: String,
    /// Whether it can be computed.
    pub possible: bool,
    /// Why (or what it uses).
    pub reason: String,
}

/// The time axis.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct TimesDoc {
    /// Number of time steps.
    pub count: usize,
    /// First time, ISO 8601.
    pub first: Option<String>,
    /// Last time, ISO 8601.
    pub last: Option<String>,
    /// CF calendar name.
    pub calendar: String,
    /// CF time units, as in the file.
    pub units: Option<String>,
    /// Every time step in file order, ISO 8601: the values `time=` accepts.
    pub values: Vec<String>,
}

/// The dataset document: what was recognised and what can be computed.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct DatasetDoc {
    /// Dataset name (the file name for the command line).
    pub name: String,
    /// File format.
    pub format: String,
    /// The grid.
    pub grid: GridDoc,
    /// Pressure levels, hPa, bottom-up.
    pub levels_hpa: Vec<f64>,
    /// Units of the level coordinate in the file.
    pub level_units: String,
    /// The time axis.
    pub times: TimesDoc,
    /// Recognised variables.
    pub variables: Vec<VariableDoc>,
    /// Diagnostics and whether each is possible.
    pub diagnostics: Vec<DiagnosticDoc>,
    /// The caution text.
    pub caution: String,
}

impl DatasetDoc {
    /// Describes an open dataset.
    pub fn new(name: &str, ds: &Dataset) -> Self {
        let grid = ds.grid();
        let spacing = |v: &[f64]| {
            let span: f64 = v.windows(2).map(|w| (w[1] - w[0]).rem_euclid(360.0)).sum::<f64>();
            if v.len() > 1 { span / (v.len() - 1) as f64 } else { 0.0 }
        };
        let (lat, lon) = (grid.lat(), grid.lon());
        let times = ds.times();
        Self {
            name: name.to_string(),
            format: ds.format().to_string(),
            grid: GridDoc {
                n_lat: grid.n_lat(),
                n_lon: grid.n_lon(),
                lat_min: lat[0],
                lat_max: lat[lat.len() - 1],
                lat_spacing: spacing(lat),
                lon_first: lon[0],
                lon_last: lon[lon.len() - 1],
                lon_spacing: spacing(lon),
                lat_order_in_file: if ds.latitude_descending() {
                    "north_to_south"
                } else {
                    "south_to_north"
                }
                .into(),
                periodic: grid.is_periodic(),
            },
            levels_hpa: ds.levels().all_hpa(),
            level_units: ds.level_units().to_string(),
            times: TimesDoc {
                count: times.len(),
                first: times.first().cloned(),
                last: times.last().cloned(),
                calendar: ds.calendar().cf_name().to_string(),
                units: ds.time_units().map(str::to_string),
                values: times.to_vec(),
            },
            variables: ds.recognised().iter().map(variable_doc).collect(),
            diagnostics: ds.diagnostics().iter().map(diagnostic_doc).collect(),
            caution: crate::CAUTION.to_string(),
        }
    }
}

fn variable_doc(r: &Recognised) -> VariableDoc {
    VariableDoc {
        role: r.role.key().to_string(),
        variable: r.variable.clone(),
        units: r.units.clone(),
        conversion: r.conversion.clone(),
        matched_by: r.matched_by.clone(),
    }
}

fn diagnostic_doc(c: &Capability) -> DiagnosticDoc {
    DiagnosticDoc { name: c.name.to_string(), possible: c.possible, reason: c.reason.clone() }
}

/// The gridded thickness and thermal wind of one layer over a box, decimated by `stride`.
///
/// Rows run south to north and columns west to east (through the antimeridian for a box that
/// crosses it); `values[row][col]` belongs to `lat[row]`, `lon[col]`. A masked or undefined
/// cell is `null`.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct GridValuesDoc {
    /// Every `stride`-th row and column of the box is given, starting at its south-west cell.
    pub stride: usize,
    /// Latitudes of the rows, degrees north.
    pub lat: Vec<f64>,
    /// Longitudes of the columns, degrees east, as stored in the file.
    pub lon: Vec<f64>,
    /// Layer thickness (the primary method), gpm, by row.
    pub thickness_m: Vec<Vec<Option<f32>>>,
    /// Eastward thermal wind, m s⁻¹, by row.
    pub thermal_wind_u_ms: Vec<Vec<Option<f32>>>,
    /// Northward thermal wind, m s⁻¹, by row.
    pub thermal_wind_v_ms: Vec<Vec<Option<f32>>>,
}

/// The answer of the service's layer query: the profile document with the one deep layer and,
/// when asked for, the layer's values on the grid.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct LayerResponseDoc {
    /// The profile document (one layer).
    #[serde(flatten)]
    pub profile: ProfileDoc,
    /// The gridded layer values (`grid=true` only).
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub grid: Option<GridValuesDoc>,
}

/// One dataset in the service's list.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct DatasetSummaryDoc {
    /// The dataset's name, as used in URLs.
    pub name: String,
    /// Whether the dataset is loaded and answers queries.
    pub available: bool,
    /// Where its document is, relative to the service root.
    pub href: String,
    /// Pressure levels, hPa, bottom-up (empty when unavailable).
    pub levels_hpa: Vec<f64>,
    /// The time axis (absent when unavailable).
    pub times: Option<TimesDoc>,
}

/// The list of datasets the service offers.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct DatasetListDoc {
    /// The datasets, by name.
    pub datasets: Vec<DatasetSummaryDoc>,
    /// The caution text.
    pub caution: String,
}

/// The load state of one dataset.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct DatasetStatusDoc {
    /// The dataset's name.
    pub name: String,
    /// Whether a file of it is loaded and answers queries.
    pub serving: bool,
    /// The file name (no folder) being served.
    pub file: Option<String>,
    /// When that file was loaded, ISO 8601 UTC.
    pub loaded_at: Option<String>,
    /// The last load or reload that failed, and why; cleared by the next good load.
    pub error: Option<String>,
}

/// The readiness document: every configured dataset and its state.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct ReadyDoc {
    /// True when every dataset is serving.
    pub ready: bool,
    /// Each dataset's state.
    pub datasets: Vec<DatasetStatusDoc>,
}

/// The liveness document.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct HealthDoc {
    /// Always `"ok"`.
    pub status: String,
}

/// What went wrong with a request.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct ErrorBody {
    /// A stable, machine-readable code, such as `invalid_bbox` or `time_not_found`.
    pub code: String,
    /// What was wrong and what to do instead.
    pub message: String,
    /// For `too_many_cells`: the smallest stride whose grid fits the cell limit.
    #[serde(skip_serializing_if = "Option::is_none", default)]
    pub stride: Option<usize>,
}

/// The body of every error response.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize, ToSchema)]
pub struct ErrorDoc {
    /// The error.
    pub error: ErrorBody,
}
