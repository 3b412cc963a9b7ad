//! Box means: the profile of a box (physics.md, "Box means").
//!
//! A cell belongs to the box when its centre lies inside, edges included. Every quantity is a
//! cos φ–weighted mean over the cells of the box where it is defined; vectors are averaged by
//! component, and their speed and direction are those of the mean vector. The turning of a
//! layer is judged from the box-mean geostrophic winds at its bottom and top.

use std::ops::Range;

use ndarray::{ArrayView2, ArrayView3, Axis, s};

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

/// The cells of a box: the rows with their weights cos φ and the runs of columns, the same
/// for every row of a regular grid. Means walk each row's runs as contiguous slices.
struct BoxCells {
    rows: Vec<(usize, f64)>,
    cols: Vec<Range<usize>>,
}

/// Sum and count of the finite values of one row of a box, in f64, over the row's runs of
/// columns in order. The k-th cell of the row goes to partial sum k mod 4 wherever the runs
/// split, so a box gets the same bits whether its row is one run of a block or two runs
/// across the seam of a periodic grid; four partial sums let the compiler keep several
/// additions in flight.
#[derive(Default)]
struct RowSum {
    s: [f64; 4],
    n: [usize; 4],
    k: usize,
}

impl RowSum {
    #[inline]
    fn push(&mut self, lane: usize, x: f32) {
        let ok = x.is_finite();
        self.s[lane] += if ok { f64::from(x) } else { 0.0 };
        self.n[lane] += usize::from(ok);
    }

    #[inline]
    fn add(&mut self, xs: &[f32]) {
        let head = ((4 - self.k % 4) % 4).min(xs.len());
        for &x in &xs[..head] {
            self.push(self.k % 4, x);
            self.k += 1;
        }
        let mut chunks = xs[head..].chunks_exact(4);
        for c in &mut chunks {
            for (lane, &x) in c.iter().enumerate() {
                self.push(lane, x);
            }
        }
        self.k += xs[head..].len() - chunks.remainder().len();
        for &x in chunks.remainder() {
            self.push(self.k % 4, x);
            self.k += 1;
        }
    }

    fn total(&self) -> (f64, usize) {
        ((self.s[0] + self.s[1]) + (self.s[2] + self.s[3]), self.n.iter().sum())
    }
}

/// Sums and count of the cells where both `u` and `v` are finite, added to `acc`.
#[inline]
fn finite_pair_sum(u: &[f32], v: &[f32], acc: &mut (f64, f64, usize)) {
    for (&x, &y) in u.iter().zip(v) {
        let ok = x.is_finite() && y.is_finite();
        acc.0 += if ok { f64::from(x) } else { 0.0 };
        acc.1 += if ok { f64::from(y) } else { 0.0 };
        acc.2 += usize::from(ok);
    }
}

impl BoxCells {
    fn new(grid: &crate::Grid, sel: &crate::Selection, bbox: &BBox) -> BoxCells {
        // A cell is in the box when its centre is: on a regular grid that is a row test times
        // a column test, so the box is (rows inside) × (columns inside).
        let rows = sel
            .rows
            .clone()
            .filter(|&j| grid.row_in_box(j, bbox))
            .map(|j| (j, grid.lat()[j].to_radians().cos()))
            .collect();
        let mut cols: Vec<Range<usize>> = Vec::new();
        for r in sel.col_ranges() {
            for i in r {
                if !bbox.contains_lon(grid.lon()[i]) {
                    continue;
                }
                match cols.last_mut() {
                    Some(last) if last.end == i => last.end = i + 1,
                    _ => cols.push(i..i + 1),
                }
            }
        }
        BoxCells { rows, cols }
    }

    fn n_cells(&self) -> usize {
        self.rows.len() * self.cols.iter().map(ExactSizeIterator::len).sum::<usize>()
    }

    /// Each row of the box in `a`: its weight and its runs of columns as slices.
    fn for_rows(
        &self,
        a: &ArrayView2<'_, f32>,
        mut f: impl FnMut(f64, &mut dyn Iterator<Item = &[f32]>),
    ) {
        for &(j, w) in &self.rows {
            let row = a.row(j);
            match row.to_slice() {
                Some(xs) => f(w, &mut self.cols.iter().map(|r| &xs[r.clone()])),
                None => {
                    // Not met with the arrays of this crate, which are all in standard order.
                    let xs = row.to_vec();
                    f(w, &mut self.cols.iter().map(|r| &xs[r.clone()]))
                }
            }
        }
    }

    fn mean(&self, a: ArrayView2<'_, f32>) -> Option<f64> {
        let (mut sum, mut weight) = (0.0, 0.0);
        self.for_rows(&a, |w, runs| {
            let mut row = RowSum::default();
            for xs in runs {
                row.add(xs);
            }
            let (s, n) = row.total();
            sum += w * s;
            weight += w * n as f64;
        });
        (weight > 0.0).then(|| sum / weight)
    }

    /// The mean vector where both components are defined, and the number of such cells.
    fn mean_vector_counted(
        &self,
        u: ArrayView2<'_, f32>,
        v: ArrayView2<'_, f32>,
    ) -> (Option<Vector>, usize) {
        let (mut su, mut sv, mut weight, mut count) = (0.0, 0.0, 0.0, 0);
        for &(j, w) in &self.rows {
            let (ur, vr) = (u.row(j), v.row(j));
            let (ub, vb);
            let (x, y) = match (ur.to_slice(), vr.to_slice()) {
                (Some(x), Some(y)) => (x, y),
                _ => {
                    // Not met with the arrays of this crate, which are all in standard order.
                    (ub, vb) = (ur.to_vec(), vr.to_vec());
                    (ub.as_slice(), vb.as_slice())
                }
            };
            let mut acc = (0.0, 0.0, 0);
            for r in &self.cols {
                finite_pair_sum(&x[r.clone()], &y[r.clone()], &mut acc);
            }
            su += w * acc.0;
            sv += w * acc.1;
            weight += w * acc.2 as f64;
            count += acc.2;
        }
        ((weight > 0.0).then(|| Vector { u: su / weight, v: sv / weight }), count)
    }

    fn mean_vector(&self, u: ArrayView2<'_, f32>, v: ArrayView2<'_, f32>) -> Option<Vector> {
        self.mean_vector_counted(u, v).0
    }

    /// Cells of the box by the mask reason of each.
    fn mask_counts(&self, mask: ArrayView2<'_, u8>) -> MaskCounts {
        let mut counts = MaskCounts::default();
        for &(j, _) in &self.rows {
            for r in &self.cols {
                for &m in mask.slice(s![j, r.clone()]) {
                    counts.add(MaskReason::from_u8(m));
                }
            }
        }
        counts
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
    let bc = BoxCells::new(grid, &sel, bbox);
    let levels: Vec<LevelMeans> = (0..fields.levels().len())
        .map(|k| {
            let geo = diag.levels.get(k);
            let (geostrophic_wind, valid_cells) = geo.map_or((None, 0), |g| {
                bc.mean_vector_counted(g.geostrophic_u.view(), g.geostrophic_v.view())
            });
            LevelMeans {
                pressure_pa: fields.levels().pa()[k],
                geopotential_height: level_view(fields.geopotential_height(), k)
                    .and_then(|z| bc.mean(z)),
                temperature: level_view(fields.temperature(), k).and_then(|t| bc.mean(t)),
                geostrophic_wind,
                wind: fields.wind().and_then(|(u, v)| {
                    bc.mean_vector(u.index_axis_move(Axis(0), k), v.index_axis_move(Axis(0), k))
                }),
                valid_cells,
            }
        })
        .collect();
    let layers = diag.layers.iter().map(|l| layer_means(fields, l, &levels, &bc)).collect();
    Ok(BoxProfile { bbox: *bbox, n_cells: bc.n_cells(), levels, layers })
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
    let counts = bc.mask_counts(l.mask.view());
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
