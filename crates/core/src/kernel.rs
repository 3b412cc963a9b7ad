//! The diagnostics of one time step: geostrophic wind at every level and, for every requested
//! layer, thickness, layer-mean temperature, thermal wind and the quantities built on them.
//!
//! Each layer is computed in three passes over rows, each pass parallel over rows (and the
//! layers themselves in parallel):
//! 1. *pointwise*: thickness (both methods), layer-mean temperature, N², observed shear;
//! 2. *stencil*: derivatives of the thickness and of the layer-mean temperature, and every
//!    quantity that needs them, with the mask reason of each cell;
//! 3. *below ground*: the pointwise outputs are blanked where the layer is under the surface.
//!
//! Pass 2 reads the unblanked pointwise rows of its neighbours, so the below-ground mask
//! removes values only at the cells it names (physics.md, "What is undefined").
//!
//! Each output row is written by exactly one task, so serial and parallel runs produce the same
//! bits. Arithmetic is `f64` per cell; storage is `f32`.

use ndarray::{Array2, ArrayView2, ArrayView3, Axis};
use rayon::prelude::*;

use crate::fields::Fields;
use crate::grid::Stencil;
use crate::{Config, Layer, MaskReason};

/// Gradients of the layer-mean temperature below this magnitude (K m⁻¹, i.e. 0.01 K per
/// 100 km) leave the balance ratio undefined: its denominator, the baroclinic torque, is ~0.
pub const MIN_GRADIENT_FOR_RATIO: f64 = 1e-7;

/// The coefficient of the maximum Eady growth rate, σ = 0.3098 |f| |∂V/∂z| / N
/// (Lindzen & Farrell 1980).
const EADY_COEFFICIENT: f64 = 0.3098;

/// How to spread the work.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Parallelism {
    /// On the current thread only.
    Serial,
    /// On the current rayon thread pool, over layers and rows.
    #[default]
    Rayon,
}

/// Which formula gave a layer's primary thickness.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum ThicknessMethod {
    /// ΔZ = Z(p_t) − Z(p_b) from geopotential.
    Geopotential,
    /// ΔZ = (R_d/g0) T̄ ln(p_b/p_t), hypsometric, from temperature.
    Temperature,
}

/// What the layer-mean temperature is.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MeanTemperatureKind {
    /// Mean virtual temperature (specific humidity present).
    Virtual,
    /// Mean temperature (no humidity in the file).
    Dry,
    /// No temperature in the file: the mean (virtual) temperature implied by the
    /// geopotential thickness, T̄ = g0 ΔZ / (R_d ln(p_b/p_t)).
    FromThickness,
}

/// The geostrophic wind at one level; `NaN` where masked.
#[derive(Debug, Clone)]
pub struct LevelDiagnostics {
    /// Eastward geostrophic wind u_g, m s⁻¹.
    pub geostrophic_u: Array2<f32>,
    /// Northward geostrophic wind v_g, m s⁻¹.
    pub geostrophic_v: Array2<f32>,
}

/// Every diagnostic of one layer on the grid, in SI units; `NaN` where undefined.
#[derive(Debug, Clone)]
pub struct LayerDiagnostics {
    /// The layer.
    pub layer: Layer,
    /// How [`Self::thickness`] was obtained.
    pub thickness_method: ThicknessMethod,
    /// What [`Self::mean_temperature`] is.
    pub mean_temperature_kind: MeanTemperatureKind,
    /// Primary thickness ΔZ, gpm.
    pub thickness: Array2<f32>,
    /// Hypsometric thickness from temperature, gpm (when temperature is present).
    pub thickness_from_temperature: Option<Array2<f32>>,
    /// Layer-mean temperature T̄, K.
    pub mean_temperature: Array2<f32>,
    /// Eastward thermal wind u_T, m s⁻¹.
    pub thermal_wind_u: Array2<f32>,
    /// Northward thermal wind v_T, m s⁻¹.
    pub thermal_wind_v: Array2<f32>,
    /// Magnitude of the isobaric gradient of T̄, K m⁻¹.
    pub temperature_gradient: Array2<f32>,
    /// Baroclinic torque B = (g0/T̄)|∇T̄|, s⁻².
    pub baroclinic_torque: Array2<f32>,
    /// Rotational torque C = |f||V_T|/ΔZ, s⁻².
    pub rotational_torque: Array2<f32>,
    /// Balance ratio C/B (needs both geopotential and temperature).
    pub balance_ratio: Option<Array2<f32>>,
    /// Thermal advection −V̄_g·∇T̄, K s⁻¹ (needs geopotential).
    pub thermal_advection: Option<Array2<f32>>,
    /// Turning s = u_b v_t − v_b u_t of the geostrophic wind, m² s⁻² (needs geopotential);
    /// negative: veering, positive: backing.
    pub turning: Option<Array2<f32>>,
    /// Static stability N², s⁻² (needs temperature).
    pub n_squared: Option<Array2<f32>>,
    /// Eady growth rate, s⁻¹ (needs temperature).
    pub eady_growth_rate: Option<Array2<f32>>,
    /// Observed shear V(p_t) − V(p_b), m s⁻¹, eastward and northward (needs wind).
    pub observed_shear: Option<(Array2<f32>, Array2<f32>)>,
    /// Ageostrophic shear, observed shear − V_T, m s⁻¹ (needs wind).
    pub ageostrophic_shear: Option<(Array2<f32>, Array2<f32>)>,
    /// Why the thermal wind is undefined at each cell ([`MaskReason`] as `u8`).
    pub mask: Array2<u8>,
}

/// All diagnostics of one time step.
#[derive(Debug, Clone)]
pub struct Diagnostics {
    /// Geostrophic wind per level, bottom-up; empty without geopotential.
    pub levels: Vec<LevelDiagnostics>,
    /// One entry per requested layer, in the order requested.
    pub layers: Vec<LayerDiagnostics>,
}

/// Computes every diagnostic for `layers` (from [`crate::Levels::layer`] or
/// [`crate::Levels::adjacent_layers`]) on the current rayon pool.
///
/// # Panics
/// If a layer's indices are not levels of `fields` with `bottom < top`; layers built by
/// [`crate::Levels`] always are.
pub fn compute(fields: &Fields, layers: &[Layer], cfg: &Config) -> Diagnostics {
    compute_with(fields, layers, cfg, Parallelism::Rayon)
}

/// [`compute`] with a choice of [`Parallelism`]; both choices give identical results.
pub fn compute_with(
    fields: &Fields,
    layers: &[Layer],
    cfg: &Config,
    par: Parallelism,
) -> Diagnostics {
    for l in layers {
        assert!(
            l.bottom < l.top && l.top < fields.levels().len(),
            "layer {l:?} is not a layer of these levels"
        );
    }
    let ctx = Context::new(fields, cfg);
    let levels: Vec<LevelDiagnostics> = match par {
        Parallelism::Serial => (0..ctx.n_levels_with_z()).map(|k| ctx.level(k, par)).collect(),
        Parallelism::Rayon => {
            (0..ctx.n_levels_with_z()).into_par_iter().map(|k| ctx.level(k, par)).collect()
        }
    };
    let layers = match par {
        Parallelism::Serial => layers.iter().map(|l| ctx.layer(*l, &levels, par)).collect(),
        Parallelism::Rayon => layers.par_iter().map(|l| ctx.layer(*l, &levels, par)).collect(),
    };
    Diagnostics { levels, layers }
}

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum RowKind {
    Normal,
    Equator,
    Pole,
}

/// Per-row geometry and everything shared by all levels and layers.
struct Context<'a> {
    fields: &'a Fields,
    cfg: &'a Config,
    /// Coriolis parameter per row.
    coriolis: Vec<f64>,
    /// 1 / (a cos φ) per row.
    inv_a_cos: Vec<f64>,
    kind: Vec<RowKind>,
    n_lon: usize,
}

/// Runs `body(row_index, row)` for every row, serially or on rayon.
fn for_rows<R: Send>(par: Parallelism, rows: Vec<R>, body: impl Fn(usize, R) + Sync) {
    match par {
        Parallelism::Serial => rows.into_iter().enumerate().for_each(|(j, r)| body(j, r)),
        Parallelism::Rayon => rows.into_par_iter().enumerate().for_each(|(j, r)| body(j, r)),
    }
}

fn nan_grid(n_lat: usize, n_lon: usize) -> Array2<f32> {
    Array2::from_elem((n_lat, n_lon), f32::NAN)
}

fn rows_mut(a: &mut Array2<f32>, n_lon: usize) -> std::slice::ChunksMut<'_, f32> {
    a.as_slice_mut().expect("kernel arrays are in standard layout").chunks_mut(n_lon)
}

fn opt_rows_mut(a: &mut Option<Array2<f32>>, n_lon: usize) -> Vec<Option<&mut [f32]>> {
    match a {
        Some(a) => rows_mut(a, n_lon).map(Some).collect(),
        None => Vec::new(),
    }
}

type RowIter<'a> = std::vec::IntoIter<Option<&'a mut [f32]>>;

/// The rows of an optional pair of outputs (eastward, northward), as for [`opt_rows_mut`].
fn pair_rows_mut(
    a: &mut Option<(Array2<f32>, Array2<f32>)>,
    n_lon: usize,
) -> (RowIter<'_>, RowIter<'_>) {
    match a {
        Some((u, v)) => (
            rows_mut(u, n_lon).map(Some).collect::<Vec<_>>().into_iter(),
            rows_mut(v, n_lon).map(Some).collect::<Vec<_>>().into_iter(),
        ),
        None => (Vec::new().into_iter(), Vec::new().into_iter()),
    }
}

/// Takes the next row of an optional output (an empty vector stands for "absent").
fn next_opt<'a>(v: &mut RowIter<'a>) -> Option<&'a mut [f32]> {
    v.next().flatten()
}

impl<'a> Context<'a> {
    fn new(fields: &'a Fields, cfg: &'a Config) -> Self {
        let grid = fields.grid();
        let c = &cfg.constants;
        let coriolis = grid.lat().iter().map(|&p| c.coriolis(p)).collect();
        let inv_a_cos =
            grid.lat().iter().map(|&p| 1.0 / (c.radius * p.to_radians().cos())).collect();
        let kind = (0..grid.n_lat())
            .map(|j| {
                if grid.is_pole_row(j) {
                    RowKind::Pole
                } else if grid.lat()[j].abs() < cfg.equator_band_deg {
                    RowKind::Equator
                } else {
                    RowKind::Normal
                }
            })
            .collect();
        Self { fields, cfg, coriolis, inv_a_cos, kind, n_lon: grid.n_lon() }
    }

    fn n_levels_with_z(&self) -> usize {
        if self.fields.geopotential_height().is_some() { self.fields.levels().len() } else { 0 }
    }

    fn n_lat(&self) -> usize {
        self.fields.grid().n_lat()
    }

    /// The surface fields of row `j`, to tell which cells lie under the ground.
    fn ground_row(&self, j: usize) -> Ground<'a> {
        Ground {
            ps: self.fields.surface_pressure().map(|a| row(&a, j)),
            zs: self.fields.surface_height().map(|a| row(&a, j)),
        }
    }

    /// Geostrophic wind at level `k`: u_g = −(g0/f) ∂Z/∂y, v_g = (g0/f) ∂Z/∂x.
    fn level(&self, k: usize, par: Parallelism) -> LevelDiagnostics {
        let z3 = self.fields.geopotential_height().expect("levels are computed only with Z");
        let z = z3.index_axis(Axis(0), k);
        let (n_lat, n_lon) = (self.n_lat(), self.n_lon);
        let mut u = nan_grid(n_lat, n_lon);
        let mut v = nan_grid(n_lat, n_lon);
        let rows: Vec<_> = rows_mut(&mut u, n_lon).zip(rows_mut(&mut v, n_lon)).collect();
        let p = self.fields.levels().pa()[k];
        let g0 = self.cfg.constants.g0;
        let inv_a = 1.0 / self.cfg.constants.radius;
        let cols = self.fields.grid().col_stencils();
        for_rows(par, rows, |j, (u_row, v_row)| {
            if self.kind[j] != RowKind::Normal {
                return;
            }
            let rs = self.fields.grid().row_stencil(j);
            let gf = g0 / self.coriolis[j];
            let (zm, z0, zp) = (row(&z, rs.minus), row(&z, j), row(&z, rs.plus));
            let dy = rs.inv_delta * inv_a;
            let dx = self.inv_a_cos[j];
            let ground = self.ground_row(j);
            for i in 0..n_lon {
                let centre = f64::from(z0[i]);
                if centre.is_nan() || ground.below(i, p, centre) {
                    continue;
                }
                let dzdx = diff(z0, cols[i]) * dx;
                let dzdy = (f64::from(zp[i]) - f64::from(zm[i])) * dy;
                // A wind is a vector: where a stencil point of either component is missing,
                // both are undefined.
                if dzdx.is_nan() || dzdy.is_nan() {
                    continue;
                }
                u_row[i] = (-gf * dzdy) as f32;
                v_row[i] = (gf * dzdx) as f32;
            }
        });
        LevelDiagnostics { geostrophic_u: u, geostrophic_v: v }
    }

    fn layer(
        &self,
        layer: Layer,
        levels: &[LevelDiagnostics],
        par: Parallelism,
    ) -> LayerDiagnostics {
        let mut out = self.pointwise(layer, par);
        self.stencil(&mut out, levels, par);
        if self.fields.surface_pressure().is_some() || self.fields.surface_height().is_some() {
            blank_below_ground(&mut out);
        }
        out
    }

    /// Pass 1: thickness, layer-mean temperature, N² and observed shear, cell by cell.
    fn pointwise(&self, layer: Layer, par: Parallelism) -> LayerDiagnostics {
        let f = self.fields;
        let c = &self.cfg.constants;
        let (n_lat, n_lon) = (self.n_lat(), self.n_lon);
        let pa = f.levels().pa();
        let (pb, pt) = (pa[layer.bottom], pa[layer.top]);
        let log_ratio = (pb / pt).ln();
        let z = f.geopotential_height();
        let t = f.temperature();
        let q = f.specific_humidity();
        let wind = f.wind();
        // Trapezoid weights in ln p over the levels of the layer, normalised by ln(p_b/p_t).
        let weights: Vec<f64> = (layer.bottom..=layer.top)
            .map(|k| {
                let below = if k > layer.bottom { (pa[k - 1] / pa[k]).ln() } else { 0.0 };
                let above = if k < layer.top { (pa[k] / pa[k + 1]).ln() } else { 0.0 };
                0.5 * (below + above) / log_ratio
            })
            .collect();
        let (theta_b_factor, theta_t_factor) =
            ((c.p_ref / pb).powf(c.kappa()), (c.p_ref / pt).powf(c.kappa()));

        let mut thickness = nan_grid(n_lat, n_lon);
        let mut thickness_t = t.map(|_| nan_grid(n_lat, n_lon));
        let mut tbar = nan_grid(n_lat, n_lon);
        let mut n2 = t.map(|_| nan_grid(n_lat, n_lon));
        let mut obs = wind.map(|_| (nan_grid(n_lat, n_lon), nan_grid(n_lat, n_lon)));
        {
            let mut th_t = opt_rows_mut(&mut thickness_t, n_lon).into_iter();
            let mut n2_rows = opt_rows_mut(&mut n2, n_lon).into_iter();
            let (mut obs_u, mut obs_v) = pair_rows_mut(&mut obs, n_lon);
            let rows: Vec<_> = rows_mut(&mut thickness, n_lon)
                .zip(rows_mut(&mut tbar, n_lon))
                .map(|(th, tb)| {
                    (
                        th,
                        tb,
                        next_opt(&mut th_t),
                        next_opt(&mut n2_rows),
                        next_opt(&mut obs_u),
                        next_opt(&mut obs_v),
                    )
                })
                .collect();
            let n_lat = self.n_lat();
            for_rows(par, rows, |j, (th, tb, th_t, n2_row, obs_u, obs_v)| {
                // Rows of level k of a 3-D field, as contiguous slices.
                let at = |a, k| level_row(a, n_lat, n_lon, k, j);
                // Σ w_k T_v,k accumulated in f64, one level at a time (contiguous inner loops).
                let tbar_acc = t.as_ref().map(|t| {
                    let mut acc = vec![0.0f64; n_lon];
                    for (k, &w) in (layer.bottom..=layer.top).zip(&weights) {
                        let tk = at(t, k);
                        match &q {
                            Some(q) => {
                                let qk = at(q, k);
                                for ((a, &tv), &qv) in acc.iter_mut().zip(tk).zip(qk) {
                                    let virt = 1.0 + c.virtual_factor * f64::from(qv);
                                    *a += w * f64::from(tv) * virt;
                                }
                            }
                            None => {
                                for (a, &tv) in acc.iter_mut().zip(tk) {
                                    *a += w * f64::from(tv);
                                }
                            }
                        }
                    }
                    acc
                });
                let hyps = c.r_dry / c.g0 * log_ratio;
                match (&z, &tbar_acc) {
                    (Some(z), _) => {
                        let (zb, zt) = (at(z, layer.bottom), at(z, layer.top));
                        for ((h, &b), &t) in th.iter_mut().zip(zb).zip(zt) {
                            *h = (f64::from(t) - f64::from(b)) as f32;
                        }
                    }
                    (None, Some(acc)) => {
                        for (h, &a) in th.iter_mut().zip(acc) {
                            *h = (hyps * a) as f32;
                        }
                    }
                    (None, None) => unreachable!("Fields holds geopotential or temperature"),
                }
                match &tbar_acc {
                    Some(acc) => {
                        for (x, &a) in tb.iter_mut().zip(acc) {
                            *x = a as f32;
                        }
                        if let Some(row) = th_t {
                            for (x, &a) in row.iter_mut().zip(acc) {
                                *x = (hyps * a) as f32;
                            }
                        }
                    }
                    None => {
                        // T̄ implied by the geopotential thickness.
                        for (x, &h) in tb.iter_mut().zip(th.iter()) {
                            *x = (f64::from(h) / hyps) as f32;
                        }
                    }
                }
                if let (Some(row), Some(t)) = (n2_row, &t) {
                    let (tb_row, tt_row) = (at(t, layer.bottom), at(t, layer.top));
                    for i in 0..n_lon {
                        let theta_b = f64::from(tb_row[i]) * theta_b_factor;
                        let theta_t = f64::from(tt_row[i]) * theta_t_factor;
                        let dz = f64::from(th[i]);
                        if dz > 0.0 {
                            row[i] = (2.0 * c.g0 / (theta_b + theta_t) * (theta_t - theta_b) / dz)
                                as f32;
                        }
                    }
                }
                if let (Some(ur), Some(vr), Some((u, v))) = (obs_u, obs_v, &wind) {
                    for (x, (&b, &t)) in
                        ur.iter_mut().zip(at(u, layer.bottom).iter().zip(at(u, layer.top)))
                    {
                        *x = t - b;
                    }
                    for (x, (&b, &t)) in
                        vr.iter_mut().zip(at(v, layer.bottom).iter().zip(at(v, layer.top)))
                    {
                        *x = t - b;
                    }
                }
            });
        }
        let (n_lat, n_lon) = (self.n_lat(), self.n_lon);
        let has_z = z.is_some();
        let has_t = t.is_some();
        LayerDiagnostics {
            layer,
            thickness_method: if has_z {
                ThicknessMethod::Geopotential
            } else {
                ThicknessMethod::Temperature
            },
            mean_temperature_kind: match (has_t, q.is_some()) {
                (false, _) => MeanTemperatureKind::FromThickness,
                (true, true) => MeanTemperatureKind::Virtual,
                (true, false) => MeanTemperatureKind::Dry,
            },
            thickness,
            thickness_from_temperature: thickness_t,
            mean_temperature: tbar,
            thermal_wind_u: nan_grid(n_lat, n_lon),
            thermal_wind_v: nan_grid(n_lat, n_lon),
            temperature_gradient: nan_grid(n_lat, n_lon),
            baroclinic_torque: nan_grid(n_lat, n_lon),
            rotational_torque: nan_grid(n_lat, n_lon),
            balance_ratio: (has_z && has_t).then(|| nan_grid(n_lat, n_lon)),
            thermal_advection: has_z.then(|| nan_grid(n_lat, n_lon)),
            turning: has_z.then(|| nan_grid(n_lat, n_lon)),
            eady_growth_rate: has_t.then(|| nan_grid(n_lat, n_lon)),
            n_squared: n2,
            ageostrophic_shear: obs
                .as_ref()
                .map(|_| (nan_grid(n_lat, n_lon), nan_grid(n_lat, n_lon))),
            observed_shear: obs,
            mask: Array2::zeros((n_lat, n_lon)),
        }
    }

    /// Pass 2: every quantity that needs a horizontal derivative, and the mask reasons.
    fn stencil(&self, out: &mut LayerDiagnostics, levels: &[LevelDiagnostics], par: Parallelism) {
        let c = &self.cfg.constants;
        let n_lon = self.n_lon;
        let grid = self.fields.grid();
        let cols = grid.col_stencils();
        let inv_a = 1.0 / c.radius;
        let layer = out.layer;
        let pb = self.fields.levels().pa()[layer.bottom];
        let z = self.fields.geopotential_height();
        let (geo_b, geo_t) = match levels {
            [] => (None, None),
            _ => (Some(&levels[layer.bottom]), Some(&levels[layer.top])),
        };
        let thickness = out.thickness.view();
        let tbar = out.mean_temperature.view();
        let n2 = out.n_squared.as_ref().map(|a| a.view());
        let obs = out.observed_shear.as_ref().map(|(u, v)| (u.view(), v.view()));

        let mut ratio = opt_rows_mut(&mut out.balance_ratio, n_lon).into_iter();
        let mut adv = opt_rows_mut(&mut out.thermal_advection, n_lon).into_iter();
        let mut turn = opt_rows_mut(&mut out.turning, n_lon).into_iter();
        let mut eady = opt_rows_mut(&mut out.eady_growth_rate, n_lon).into_iter();
        let (mut ageo_u, mut ageo_v) = pair_rows_mut(&mut out.ageostrophic_shear, n_lon);
        let rows: Vec<StencilRow<'_>> = rows_mut(&mut out.thermal_wind_u, n_lon)
            .zip(rows_mut(&mut out.thermal_wind_v, n_lon))
            .zip(rows_mut(&mut out.temperature_gradient, n_lon))
            .zip(rows_mut(&mut out.baroclinic_torque, n_lon))
            .zip(rows_mut(&mut out.rotational_torque, n_lon))
            .zip(out.mask.as_slice_mut().expect("standard layout").chunks_mut(n_lon))
            .map(|(((((ut, vt), grad), b), cr), mask)| StencilRow {
                ut,
                vt,
                grad,
                b,
                c: cr,
                mask,
                ratio: next_opt(&mut ratio),
                adv: next_opt(&mut adv),
                turn: next_opt(&mut turn),
                eady: next_opt(&mut eady),
                ageo_u: next_opt(&mut ageo_u),
                ageo_v: next_opt(&mut ageo_v),
            })
            .collect();

        for_rows(par, rows, |j, mut r| {
            let kind = self.kind[j];
            let rs = grid.row_stencil(j);
            let dy = rs.inv_delta * inv_a;
            let dx = self.inv_a_cos[j];
            let f = self.coriolis[j];
            let gf = c.g0 / f;
            let (hm, h0, hp) =
                (row(&thickness, rs.minus), row(&thickness, j), row(&thickness, rs.plus));
            let (tm, t0, tp) = (row(&tbar, rs.minus), row(&tbar, j), row(&tbar, rs.plus));
            let ground = self.ground_row(j);
            let n_lat = grid.n_lat();
            let z_b = z.as_ref().map(|z| level_row(z, n_lat, n_lon, layer.bottom, j));
            let geo = geo_b.zip(geo_t).map(|(b, t)| {
                (
                    row(&b.geostrophic_u.view(), j),
                    row(&b.geostrophic_v.view(), j),
                    row(&t.geostrophic_u.view(), j),
                    row(&t.geostrophic_v.view(), j),
                )
            });
            let n2_row = n2.as_ref().map(|a| row(a, j));
            let obs_rows = obs.as_ref().map(|(u, v)| (row(u, j), row(v, j)));
            for i in 0..n_lon {
                let zb = z_b.map_or(f64::NAN, |r| f64::from(r[i]));
                if ground.below(i, pb, zb) {
                    r.mask[i] = MaskReason::BelowGround as u8;
                    continue;
                }
                if kind == RowKind::Pole {
                    r.mask[i] = MaskReason::Pole as u8;
                    continue;
                }
                let tb = f64::from(t0[i]);
                // A missing T̄ at the cell removes its gradient too (physics.md: missing at the
                // point or at a stencil neighbour), although the centred stencil skips it.
                let (dtdx, dtdy) = if tb.is_nan() {
                    (f64::NAN, f64::NAN)
                } else {
                    (diff(t0, cols[i]) * dx, (f64::from(tp[i]) - f64::from(tm[i])) * dy)
                };
                let grad = dtdx.hypot(dtdy);
                r.grad[i] = grad as f32;
                r.b[i] = (c.g0 / tb * grad) as f32;
                if kind == RowKind::Equator {
                    r.mask[i] = MaskReason::Equator as u8;
                    continue;
                }
                let dz = f64::from(h0[i]);
                let ddzdx = diff(h0, cols[i]) * dx;
                let ddzdy = (f64::from(hp[i]) - f64::from(hm[i])) * dy;
                // Both components or neither: a vector with one missing stencil point is
                // undefined as a whole.
                let (ut, vt) = if dz.is_nan() || ddzdx.is_nan() || ddzdy.is_nan() {
                    (f64::NAN, f64::NAN)
                } else {
                    (-gf * ddzdy, gf * ddzdx)
                };
                r.ut[i] = ut as f32;
                r.vt[i] = vt as f32;
                let speed_t = ut.hypot(vt);
                let shear_per_m = if dz > 0.0 { speed_t / dz } else { f64::NAN };
                let rot = f.abs() * shear_per_m;
                r.c[i] = rot as f32;
                if let Some(row) = r.ratio.as_deref_mut() {
                    if grad >= MIN_GRADIENT_FOR_RATIO {
                        row[i] = (rot / (c.g0 / tb * grad)) as f32;
                    }
                }
                if let Some((gub, gvb, gut, gvt)) = geo {
                    let (ub, vb) = (f64::from(gub[i]), f64::from(gvb[i]));
                    let (uu, vu) = (f64::from(gut[i]), f64::from(gvt[i]));
                    if let Some(row) = r.adv.as_deref_mut() {
                        row[i] = (-(0.5 * (ub + uu) * dtdx + 0.5 * (vb + vu) * dtdy)) as f32;
                    }
                    if let Some(row) = r.turn.as_deref_mut() {
                        row[i] = (ub * vu - vb * uu) as f32;
                    }
                }
                if let (Some(row), Some(n2)) = (r.eady.as_deref_mut(), n2_row) {
                    let n2 = f64::from(n2[i]);
                    if n2 > 0.0 {
                        row[i] = (EADY_COEFFICIENT * f.abs() * shear_per_m / n2.sqrt()) as f32;
                    }
                }
                if let (Some(au), Some(av), Some((ou, ov))) =
                    (r.ageo_u.as_deref_mut(), r.ageo_v.as_deref_mut(), obs_rows)
                {
                    au[i] = (f64::from(ou[i]) - ut) as f32;
                    av[i] = (f64::from(ov[i]) - vt) as f32;
                }
                if ut.is_nan() || vt.is_nan() {
                    r.mask[i] = MaskReason::Missing as u8;
                }
            }
        });
    }
}

/// Surface pressure and surface height along one row.
#[derive(Clone, Copy)]
struct Ground<'a> {
    ps: Option<&'a [f32]>,
    zs: Option<&'a [f32]>,
}

impl Ground<'_> {
    /// Whether column `i` lies under the surface at pressure `p` (Pa), where the geopotential
    /// height at that pressure is `z` (NaN when unknown). Surface pressure decides when present,
    /// surface height otherwise.
    fn below(&self, i: usize, p: f64, z: f64) -> bool {
        if let Some(ps) = self.ps {
            let ps = f64::from(ps[i]);
            return ps.is_finite() && p > ps;
        }
        if let Some(zs) = self.zs {
            let zs = f64::from(zs[i]);
            return zs.is_finite() && z.is_finite() && z < zs;
        }
        false
    }
}

/// The mutable rows of one grid row that pass 2 writes.
struct StencilRow<'a> {
    ut: &'a mut [f32],
    vt: &'a mut [f32],
    grad: &'a mut [f32],
    b: &'a mut [f32],
    c: &'a mut [f32],
    mask: &'a mut [u8],
    ratio: Option<&'a mut [f32]>,
    adv: Option<&'a mut [f32]>,
    turn: Option<&'a mut [f32]>,
    eady: Option<&'a mut [f32]>,
    ageo_u: Option<&'a mut [f32]>,
    ageo_v: Option<&'a mut [f32]>,
}

/// Pass 3: blank the pointwise outputs where the layer is below ground.
fn blank_below_ground(out: &mut LayerDiagnostics) {
    let below = MaskReason::BelowGround as u8;
    let mask = out.mask.view();
    let blank = |a: &mut Array2<f32>| {
        ndarray::Zip::from(a).and(&mask).for_each(|x, &m| {
            if m == below {
                *x = f32::NAN;
            }
        })
    };
    blank(&mut out.thickness);
    blank(&mut out.mean_temperature);
    for a in [&mut out.thickness_from_temperature, &mut out.n_squared].into_iter().flatten() {
        blank(a);
    }
    if let Some((u, v)) = &mut out.observed_shear {
        blank(u);
        blank(v);
    }
}

/// Row `j` of level `k` of a `[level, lat, lon]` array in standard layout.
fn level_row<'a>(
    a: &ArrayView3<'a, f32>,
    n_lat: usize,
    n_lon: usize,
    k: usize,
    j: usize,
) -> &'a [f32] {
    let start = (k * n_lat + j) * n_lon;
    &a.to_slice().expect("kernel arrays are in standard layout")[start..start + n_lon]
}

/// Row `j` of a `[lat, lon]` array in standard layout.
fn row<'a>(a: &ArrayView2<'a, f32>, j: usize) -> &'a [f32] {
    let n = a.ncols();
    &a.to_slice().expect("kernel arrays are in standard layout")[j * n..(j + 1) * n]
}

/// ∂F/∂λ along a row (per radian) at the column of `s`.
fn diff(row: &[f32], s: Stencil) -> f64 {
    (f64::from(row[s.plus]) - f64::from(row[s.minus])) * s.inv_delta
}
