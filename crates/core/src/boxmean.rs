//! Box means: the profile of a box (physics.md, "Box means").
//!
//! A cell belongs to the box when its centre lies inside, edges included. Every quantity is a
//! cos φ–weighted mean over the cells of the box where it is defined; vectors are averaged by
//! component, and their speed and direction are those of the mean vector. The turning of a
//! layer is judged from the box-mean geostrophic winds at its bottom and top.

use ndarray::{ArrayView2, ArrayView3, Axis};

use crate::kernel::{Diagnostics, LayerDiagnostics, MeanTemperatureKind, ThicknessMethod};
use crate::{BBox, CoreError, Fields, Layer, MaskCounts, MaskReason};

/// A horizontal vector, m s⁻¹.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Vector {
    /// Eastward component.
    pub u: f64,
    /// Northward component.
    pub v: f64,
}

impl Vector {
    /// Magnitude.
    pub fn speed(&self) -> f64 {
        self.u.hypot(self.v)
    }

    /// Direction in the wind convention: degrees clockwise from north of where the vector
    /// comes from, in [0, 360).
    pub fn direction_deg(&self) -> f64 {
        let d = (-self.u).atan2(-self.v).to_degrees().rem_euclid(360.0);
        if d >= 360.0 { 0.0 } else { d }
    }
}

/// The sense in which the geostrophic wind turns with height through a layer.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Turning {
    /// Clockwise with height (s < 0).
    Veering,
    /// Counter-clockwise with height (s > 0).
    Backing,
    /// Bottom and top winds parallel (s = 0).
    None,
}

impl Turning {
    /// Judges the turning from the wind at the bottom and at the top of a layer:
    /// s = u_b v_t − v_b u_t.
    pub fn between(bottom: Vector, top: Vector) -> Self {
        let s = bottom.u * top.v - bottom.v * top.u;
        if s < 0.0 {
            Self::Veering
        } else if s > 0.0 {
            Self::Backing
        } else {
            Self::None
        }
    }
}

/// Box means at one level.
#[derive(Debug, Clone, PartialEq)]
pub struct LevelMeans {
    /// Pressure, Pa.
    pub pressure_pa: f64,
    /// Mean geopotential height, gpm.
    pub geopotential_height: Option<f64>,
    /// Mean temperature, K.
    pub temperature: Option<f64>,
    /// Mean geostrophic wind.
    pub geostrophic_wind: Option<Vector>,
    /// Mean observed wind.
    pub wind: Option<Vector>,
    /// Cells of the box where the geostrophic wind is defined.
    pub valid_cells: usize,
}

/// Box means of one layer, in SI units.
#[derive(Debug, Clone, PartialEq)]
pub struct LayerMeans {
    /// The layer.
    pub layer: Layer,
    /// Bottom pressure, Pa.
    pub bottom_pa: f64,
    /// Top pressure, Pa.
    pub top_pa: f64,
    /// How the primary thickness was obtained.
    pub thickness_method: ThicknessMethod,
    /// What the mean temperature is.
    pub mean_temperature_kind: MeanTemperatureKind,
    /// Primary thickness, gpm.
    pub thickness: Option<f64>,
    /// Hypsometric thickness from temperature, gpm.
    pub thickness_from_temperature: Option<f64>,
    /// Layer-mean temperature, K.
    pub mean_temperature: Option<f64>,
    /// Mean thermal wind.
    pub thermal_wind: Option<Vector>,
    /// Mean magnitude of the temperature gradient, K m⁻¹.
    pub temperature_gradient: Option<f64>,
    /// Mean baroclinic torque, s⁻².
    pub baroclinic_torque: Option<f64>,
    /// Mean rotational torque, s⁻².
    pub rotational_torque: Option<f64>,
    /// Mean balance ratio.
    pub balance_ratio: Option<f64>,
    /// Mean thermal advection, K s⁻¹.
    pub thermal_advection: Option<f64>,
    /// Turning judged from the box-mean geostrophic winds at bottom and top.
    pub turning: Option<Turning>,
    /// Mean N², s⁻².
    pub n_squared: Option<f64>,
    /// Mean Eady growth rate, s⁻¹.
    pub eady_growth_rate: Option<f64>,
    /// Mean observed shear.
    pub observed_shear: Option<Vector>,
    /// Mean ageostrophic shear.
    pub ageostrophic_shear: Option<Vector>,
    /// Cells of the box by mask reason.
    pub counts: MaskCounts,
}

/// The box-mean profile: levels bottom-up and the computed layers.
#[derive(Debug, Clone, PartialEq)]
pub struct BoxProfile {
    /// The box.
    pub bbox: BBox,
    /// Number of grid cells in the box.
    pub n_cells: usize,
    /// One entry per level, bottom-up.
    pub levels: Vec<LevelMeans>,
    /// One entry per computed layer.
    pub layers: Vec<LayerMeans>,
}

/// The cells of a box with their weights.
struct BoxCells {
    cells: Vec<(usize, usize, f64)>,
}

impl BoxCells {
    fn mean(&self, a: ArrayView2<'_, f32>) -> Option<f64> {
        let (mut sum, mut weight) = (0.0, 0.0);
        for &(j, i, w) in &self.cells {
            let x = f64::from(a[[j, i]]);
            if x.is_finite() {
                sum += w * x;
                weight += w;
            }
        }
        (weight > 0.0).then(|| sum / weight)
    }

    fn mean_vector(&self, u: ArrayView2<'_, f32>, v: ArrayView2<'_, f32>) -> Option<Vector> {
        let (mut su, mut sv, mut weight) = (0.0, 0.0, 0.0);
        for &(j, i, w) in &self.cells {
            let (x, y) = (f64::from(u[[j, i]]), f64::from(v[[j, i]]));
            if x.is_finite() && y.is_finite() {
                su += w * x;
                sv += w * y;
                weight += w;
            }
        }
        (weight > 0.0).then(|| Vector { u: su / weight, v: sv / weight })
    }

    /// Cells where both components of a vector are defined.
    fn count_defined(&self, u: ArrayView2<'_, f32>, v: ArrayView2<'_, f32>) -> usize {
        self.cells
            .iter()
            .filter(|&&(j, i, _)| u[[j, i]].is_finite() && v[[j, i]].is_finite())
            .count()
    }
}

fn level_view(a: Option<ArrayView3<'_, f32>>, k: usize) -> Option<ArrayView2<'_, f32>> {
    a.map(|a| a.index_axis_move(Axis(0), k))
}

/// The box-mean profile of `diag` (computed from `fields`) over `bbox`.
pub fn box_profile(
    fields: &Fields,
    diag: &Diagnostics,
    bbox: &BBox,
) -> Result<BoxProfile, CoreError> {
    let grid = fields.grid();
    let sel = grid.select_box(bbox)?;
    let cells: Vec<(usize, usize, f64)> = sel
        .rows
        .clone()
        .flat_map(|j| sel.col_indices().map(move |i| (j, i)).collect::<Vec<_>>())
        .filter(|&(j, i)| grid.cell_in_box(j, i, bbox))
        .map(|(j, i)| (j, i, grid.lat()[j].to_radians().cos()))
        .collect();
    let bc = BoxCells { cells };
    let levels: Vec<LevelMeans> = (0..fields.levels().len())
        .map(|k| {
            let geo = diag.levels.get(k);
            LevelMeans {
                pressure_pa: fields.levels().pa()[k],
                geopotential_height: level_view(fields.geopotential_height(), k)
                    .and_then(|z| bc.mean(z)),
                temperature: level_view(fields.temperature(), k).and_then(|t| bc.mean(t)),
                geostrophic_wind: geo
                    .and_then(|g| bc.mean_vector(g.geostrophic_u.view(), g.geostrophic_v.view())),
                wind: fields.wind().and_then(|(u, v)| {
                    bc.mean_vector(u.index_axis_move(Axis(0), k), v.index_axis_move(Axis(0), k))
                }),
                valid_cells: geo.map_or(0, |g| {
                    bc.count_defined(g.geostrophic_u.view(), g.geostrophic_v.view())
                }),
            }
        })
        .collect();
    let layers = diag.layers.iter().map(|l| layer_means(fields, l, &levels, &bc)).collect();
    Ok(BoxProfile { bbox: *bbox, n_cells: bc.cells.len(), levels, layers })
}

fn layer_means(
    fields: &Fields,
    l: &LayerDiagnostics,
    levels: &[LevelMeans],
    bc: &BoxCells,
) -> LayerMeans {
    let mean = |a: &Option<ndarray::Array2<f32>>| a.as_ref().and_then(|a| bc.mean(a.view()));
    let mean_vec = |a: &Option<(ndarray::Array2<f32>, ndarray::Array2<f32>)>| {
        a.as_ref().and_then(|(u, v)| bc.mean_vector(u.view(), v.view()))
    };
    let mut counts = MaskCounts::default();
    for &(j, i, _) in &bc.cells {
        counts.add(MaskReason::from_u8(l.mask[[j, i]]));
    }
    let turning =
        match (levels[l.layer.bottom].geostrophic_wind, levels[l.layer.top].geostrophic_wind) {
            (Some(b), Some(t)) => Some(Turning::between(b, t)),
            _ => None,
        };
    LayerMeans {
        layer: l.layer,
        bottom_pa: fields.levels().pa()[l.layer.bottom],
        top_pa: fields.levels().pa()[l.layer.top],
        thickness_method: l.thickness_method,
        mean_temperature_kind: l.mean_temperature_kind,
        thickness: bc.mean(l.thickness.view()),
        thickness_from_temperature: mean(&l.thickness_from_temperature),
        mean_temperature: bc.mean(l.mean_temperature.view()),
        thermal_wind: bc.mean_vector(l.thermal_wind_u.view(), l.thermal_wind_v.view()),
        temperature_gradient: bc.mean(l.temperature_gradient.view()),
        baroclinic_torque: bc.mean(l.baroclinic_torque.view()),
        rotational_torque: bc.mean(l.rotational_torque.view()),
        balance_ratio: mean(&l.balance_ratio),
        thermal_advection: mean(&l.thermal_advection),
        turning,
        n_squared: mean(&l.n_squared),
        eady_growth_rate: mean(&l.eady_growth_rate),
        observed_shear: mean_vec(&l.observed_shear),
        ageostrophic_shear: mean_vec(&l.ageostrophic_shear),
        counts,
    }
}
