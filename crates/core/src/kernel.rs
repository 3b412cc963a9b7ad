//! The diagnostics of one time step: geostrophic wind at every level and, for every requested
//! layer, thickness, layer-mean temperature, thermal wind and the quantities built on them.
//!
//! The kernel is memory-bound, so it is laid out to touch each byte as few times as it can.
//! The grid is cut into blocks of [`CHUNK_ROWS`] rows, one task per block (parallel over
//! blocks). A task walks up the levels and layers of its block: the geostrophic wind of a level
//! just before the first layer that needs it, then for each layer one fused sweep down the rows:
//! 1. *pointwise* (thickness by both methods, layer-mean temperature, N², observed shear) of
//!    row `r`, unblanked into a three-row ring and, blanked below ground, into the outputs;
//! 2. *stencil* (derivatives of the thickness and of T̄ and everything built on them, with the
//!    mask reason of each cell) of row `r − 1` from the ring, once its neighbours are known.
//!
//! So every input row is read from memory about once (the rows of a level are still in cache
//! for the next layer), every output is written exactly once with no fill beforehand, and no
//! pass reads back an output. The stencil reads its neighbours' unblanked values, so the
//! below-ground mask removes values only at the cells it names (physics.md, "What is
//! undefined"). A task recomputes the pointwise rows just outside its block into its ring
//! (the same arithmetic, so the same bits) rather than waiting for its neighbour.
//!
//! Inner loops run over contiguous rows, without branches on which outputs exist (absent ones
//! are written to scratch rows), so the compiler can vectorise them. [`compute_into`] reuses
//! the output arrays of an earlier call: a fresh array costs a page fault per 4 KiB on first
//! touch, which on the 0.25° grid took longer than the arithmetic.
//!
//! Each output row is written by exactly one task and a row's values do not depend on the
//! blocks, so serial and parallel runs produce the same bits. Arithmetic is `f64` per cell;
//! storage is `f32`.

use ndarray::{Array2, ArrayView2, ArrayView3};
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

/// All diagnostics of one time step. [`Diagnostics::default`] holds nothing yet: a value for
/// [`compute_into`] to fill.
#[derive(Debug, Clone, Default)]
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
    let mut out = Diagnostics::default();
    compute_into(&mut out, fields, layers, cfg, par);
    out
}

/// [`compute_with`] into the arrays of `out`, which are reused where their shapes already fit
/// (a run over many time steps of one grid allocates its outputs once); arrays that do not fit
/// are replaced. Every value of `out` is overwritten, so the result is the same as from
/// [`compute_with`] whatever `out` held.
///
/// # Panics
/// As [`compute`].
pub fn compute_into(
    out: &mut Diagnostics,
    fields: &Fields,
    layers: &[Layer],
    cfg: &Config,
    par: Parallelism,
) {
    compute_into_on(out, fields, layers, cfg, par, detect_avx2());
}

/// [`compute_with`] on the baseline instruction set of the target, never the AVX2 copy of the
/// arithmetic: for tests that the two give the same bits.
#[doc(hidden)]
pub fn compute_baseline(
    fields: &Fields,
    layers: &[Layer],
    cfg: &Config,
    par: Parallelism,
) -> Diagnostics {
    let mut out = Diagnostics::default();
    compute_into_on(&mut out, fields, layers, cfg, par, false);
    out
}

fn compute_into_on(
    out: &mut Diagnostics,
    fields: &Fields,
    layers: &[Layer],
    cfg: &Config,
    par: Parallelism,
    avx2: bool,
) {
    for l in layers {
        assert!(
            l.bottom < l.top && l.top < fields.levels().len(),
            "layer {l:?} is not a layer of these levels"
        );
    }
    let ctx = Context::new(fields, cfg, avx2);
    ctx.prepare(out, layers);
    let jobs = ctx.split(out);
    match par {
        Parallelism::Serial => {
            jobs.into_iter().enumerate().for_each(|(c, job)| ctx.run_chunk(c, job, layers))
        }
        Parallelism::Rayon => {
            jobs.into_par_iter().enumerate().for_each(|(c, job)| ctx.run_chunk(c, job, layers))
        }
    }
}

/// Rows per task. Each task computes the pointwise rows of its two neighbours again (into
/// scratch, never into the outputs), so a task costs `(CHUNK_ROWS + 2) / CHUNK_ROWS` of the
/// pointwise work; the input rows of two levels of a task stay in the core's L2 cache while
/// it walks up the layers.
const CHUNK_ROWS: usize = 16;

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
    /// 1 / Δλ (radians) of each column's stencil.
    col_inv_delta: Vec<f64>,
    n_lat: usize,
    n_lon: usize,
    /// Whether this processor runs AVX2: the tasks then run a copy of the arithmetic compiled
    /// for it. Both copies give the same bits (the same IEEE operations in the same order;
    /// Rust never fuses a multiply and an add on its own), the AVX2 one about 1.4 × faster.
    avx2: bool,
}

/// Whether the processor running us has AVX2 (checked once by the standard library).
fn detect_avx2() -> bool {
    #[cfg(target_arch = "x86_64")]
    {
        std::arch::is_x86_feature_detected!("avx2")
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        false
    }
}

/// The output rows of one level inside one task's block of rows.
struct LevelRows<'a> {
    u: &'a mut [f32],
    v: &'a mut [f32],
}

/// The output rows of one layer inside one task's block of rows.
struct LayerRows<'a> {
    thickness: &'a mut [f32],
    thickness_t: Option<&'a mut [f32]>,
    tbar: &'a mut [f32],
    ut: &'a mut [f32],
    vt: &'a mut [f32],
    grad: &'a mut [f32],
    b: &'a mut [f32],
    c: &'a mut [f32],
    ratio: Option<&'a mut [f32]>,
    adv: Option<&'a mut [f32]>,
    turn: Option<&'a mut [f32]>,
    n2: Option<&'a mut [f32]>,
    eady: Option<&'a mut [f32]>,
    obs: Option<(&'a mut [f32], &'a mut [f32])>,
    ageo: Option<(&'a mut [f32], &'a mut [f32])>,
    mask: &'a mut [u8],
}

/// Everything one task writes: its block of rows of every output.
struct ChunkJob<'a> {
    levels: Vec<LevelRows<'a>>,
    layers: Vec<LayerRows<'a>>,
}

/// Per-task working rows, allocated once per task and reused by every level and layer.
struct Scratch {
    /// Thickness and T̄ of the last three rows computed (row `r` in slot `r % 3`), unblanked:
    /// the stencil of a row reads its neighbours' values even where they are below ground.
    ring_h: Vec<f32>,
    ring_t: Vec<f32>,
    /// Σ w T_v in f64 along one row.
    acc: Vec<f64>,
    /// Zonal differences (per radian) of one row.
    dx_a: Vec<f64>,
    dx_b: Vec<f64>,
    /// 1 where the cell is below ground.
    below: Vec<u8>,
    /// A row of NaN, read in place of an input that is absent (its outputs are then absent too).
    nan: Vec<f32>,
    /// Rows written in place of absent outputs and then dropped.
    sink: [Vec<f32>; 6],
    lanes: Box<Lanes>,
}

impl Scratch {
    fn new(n: usize) -> Self {
        Self {
            ring_h: vec![0.0; 3 * n],
            ring_t: vec![0.0; 3 * n],
            acc: vec![0.0; n],
            dx_a: vec![0.0; n],
            dx_b: vec![0.0; n],
            below: vec![0; n],
            nan: vec![f32::NAN; n],
            sink: std::array::from_fn(|_| vec![0.0; n]),
            lanes: Lanes::new(),
        }
    }
}

/// The chunks of `len` values of an output array, in order.
fn chunks(a: &mut Array2<f32>, len: usize) -> std::slice::ChunksMut<'_, f32> {
    a.as_slice_mut().expect("kernel arrays are in standard layout").chunks_mut(len)
}

/// The chunks of an optional output; `n` times `None` when it is absent.
fn opt_chunks(a: &mut Option<Array2<f32>>, len: usize, n: usize) -> Vec<Option<&mut [f32]>> {
    match a {
        Some(a) => chunks(a, len).map(Some).collect(),
        None => (0..n).map(|_| None).collect(),
    }
}

/// The chunks of an optional pair of outputs.
fn pair_chunks(
    a: &mut Option<(Array2<f32>, Array2<f32>)>,
    len: usize,
    n: usize,
) -> Vec<Option<(&mut [f32], &mut [f32])>> {
    match a {
        Some((u, v)) => chunks(u, len).zip(chunks(v, len)).map(Some).collect(),
        None => (0..n).map(|_| None).collect(),
    }
}

/// Makes `a` a standard-layout array of `shape`, keeping its buffer when it already is one.
fn fit<T: Clone + num_zero::Zero>(a: &mut Array2<T>, shape: (usize, usize)) {
    if a.dim() != shape || !a.is_standard_layout() {
        *a = Array2::from_elem(shape, T::ZERO);
    }
}

/// Makes an optional output present (fitted) or absent.
fn fit_opt(a: &mut Option<Array2<f32>>, present: bool, shape: (usize, usize)) {
    match (a.as_mut(), present) {
        (Some(a), true) => fit(a, shape),
        (None, true) => *a = Some(Array2::zeros(shape)),
        (_, false) => *a = None,
    }
}

/// Makes an optional pair of outputs present (fitted) or absent.
fn fit_pair(a: &mut Option<(Array2<f32>, Array2<f32>)>, present: bool, shape: (usize, usize)) {
    match (a.as_mut(), present) {
        (Some((u, v)), true) => {
            fit(u, shape);
            fit(v, shape);
        }
        (None, true) => *a = Some((Array2::zeros(shape), Array2::zeros(shape))),
        (_, false) => *a = None,
    }
}

/// The zero of an output's element type, to allocate outputs without touching their pages.
mod num_zero {
    pub trait Zero {
        const ZERO: Self;
    }
    impl Zero for f32 {
        const ZERO: Self = 0.0;
    }
    impl Zero for u8 {
        const ZERO: Self = 0;
    }
}

impl<'a> Context<'a> {
    fn new(fields: &'a Fields, cfg: &'a Config, avx2: bool) -> Self {
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
        let col_inv_delta = grid.col_stencils().iter().map(|s| s.inv_delta).collect();
        Self {
            fields,
            cfg,
            coriolis,
            inv_a_cos,
            kind,
            col_inv_delta,
            n_lat: grid.n_lat(),
            n_lon: grid.n_lon(),
            avx2,
        }
    }

    fn n_levels_with_z(&self) -> usize {
        if self.fields.geopotential_height().is_some() { self.fields.levels().len() } else { 0 }
    }

    /// Gives `out` one entry per level (with geopotential) and per layer, with arrays of the
    /// grid's shape and exactly the optional outputs these fields allow.
    fn prepare(&self, out: &mut Diagnostics, layers: &[Layer]) {
        let shape = (self.n_lat, self.n_lon);
        let f = self.fields;
        let (has_z, has_t) = (f.geopotential_height().is_some(), f.temperature().is_some());
        let has_wind = f.wind().is_some();
        out.levels.truncate(self.n_levels_with_z());
        for l in &mut out.levels {
            fit(&mut l.geostrophic_u, shape);
            fit(&mut l.geostrophic_v, shape);
        }
        while out.levels.len() < self.n_levels_with_z() {
            out.levels.push(LevelDiagnostics {
                geostrophic_u: Array2::zeros(shape),
                geostrophic_v: Array2::zeros(shape),
            });
        }
        out.layers.truncate(layers.len());
        while out.layers.len() < layers.len() {
            out.layers.push(LayerDiagnostics {
                layer: layers[out.layers.len()],
                thickness_method: ThicknessMethod::Geopotential,
                mean_temperature_kind: MeanTemperatureKind::Dry,
                thickness: Array2::zeros(shape),
                thickness_from_temperature: None,
                mean_temperature: Array2::zeros(shape),
                thermal_wind_u: Array2::zeros(shape),
                thermal_wind_v: Array2::zeros(shape),
                temperature_gradient: Array2::zeros(shape),
                baroclinic_torque: Array2::zeros(shape),
                rotational_torque: Array2::zeros(shape),
                balance_ratio: None,
                thermal_advection: None,
                turning: None,
                n_squared: None,
                eady_growth_rate: None,
                observed_shear: None,
                ageostrophic_shear: None,
                mask: Array2::zeros(shape),
            });
        }
        for (d, &layer) in out.layers.iter_mut().zip(layers) {
            d.layer = layer;
            d.thickness_method =
                if has_z { ThicknessMethod::Geopotential } else { ThicknessMethod::Temperature };
            d.mean_temperature_kind = match (has_t, f.specific_humidity().is_some()) {
                (false, _) => MeanTemperatureKind::FromThickness,
                (true, true) => MeanTemperatureKind::Virtual,
                (true, false) => MeanTemperatureKind::Dry,
            };
            for a in [
                &mut d.thickness,
                &mut d.mean_temperature,
                &mut d.thermal_wind_u,
                &mut d.thermal_wind_v,
                &mut d.temperature_gradient,
                &mut d.baroclinic_torque,
                &mut d.rotational_torque,
            ] {
                fit(a, shape);
            }
            fit(&mut d.mask, shape);
            fit_opt(&mut d.thickness_from_temperature, has_t, shape);
            fit_opt(&mut d.balance_ratio, has_z && has_t, shape);
            fit_opt(&mut d.thermal_advection, has_z, shape);
            fit_opt(&mut d.turning, has_z, shape);
            fit_opt(&mut d.n_squared, has_t, shape);
            fit_opt(&mut d.eady_growth_rate, has_t, shape);
            fit_pair(&mut d.observed_shear, has_wind, shape);
            fit_pair(&mut d.ageostrophic_shear, has_wind, shape);
        }
    }

    /// Cuts every output into blocks of [`CHUNK_ROWS`] rows: one [`ChunkJob`] per block.
    fn split<'o>(&self, out: &'o mut Diagnostics) -> Vec<ChunkJob<'o>> {
        let len = CHUNK_ROWS * self.n_lon;
        let n = self.n_lat.div_ceil(CHUNK_ROWS);
        let mut jobs: Vec<ChunkJob<'o>> = (0..n)
            .map(|_| ChunkJob {
                levels: Vec::with_capacity(out.levels.len()),
                layers: Vec::with_capacity(out.layers.len()),
            })
            .collect();
        for l in &mut out.levels {
            let rows = chunks(&mut l.geostrophic_u, len).zip(chunks(&mut l.geostrophic_v, len));
            for (job, (u, v)) in jobs.iter_mut().zip(rows) {
                job.levels.push(LevelRows { u, v });
            }
        }
        for d in &mut out.layers {
            let mut thickness_t = opt_chunks(&mut d.thickness_from_temperature, len, n).into_iter();
            let mut ratio = opt_chunks(&mut d.balance_ratio, len, n).into_iter();
            let mut adv = opt_chunks(&mut d.thermal_advection, len, n).into_iter();
            let mut turn = opt_chunks(&mut d.turning, len, n).into_iter();
            let mut n2 = opt_chunks(&mut d.n_squared, len, n).into_iter();
            let mut eady = opt_chunks(&mut d.eady_growth_rate, len, n).into_iter();
            let mut obs = pair_chunks(&mut d.observed_shear, len, n).into_iter();
            let mut ageo = pair_chunks(&mut d.ageostrophic_shear, len, n).into_iter();
            let mut mask = d.mask.as_slice_mut().expect("standard layout").chunks_mut(len);
            let rows = chunks(&mut d.thickness, len)
                .zip(chunks(&mut d.mean_temperature, len))
                .zip(chunks(&mut d.thermal_wind_u, len))
                .zip(chunks(&mut d.thermal_wind_v, len))
                .zip(chunks(&mut d.temperature_gradient, len))
                .zip(chunks(&mut d.baroclinic_torque, len))
                .zip(chunks(&mut d.rotational_torque, len));
            for (job, ((((((thickness, tbar), ut), vt), grad), b), c)) in jobs.iter_mut().zip(rows)
            {
                job.layers.push(LayerRows {
                    thickness,
                    thickness_t: thickness_t.next().flatten(),
                    tbar,
                    ut,
                    vt,
                    grad,
                    b,
                    c,
                    ratio: ratio.next().flatten(),
                    adv: adv.next().flatten(),
                    turn: turn.next().flatten(),
                    n2: n2.next().flatten(),
                    eady: eady.next().flatten(),
                    obs: obs.next().flatten(),
                    ageo: ageo.next().flatten(),
                    mask: mask.next().expect("one mask chunk per block"),
                });
            }
        }
        jobs
    }

    /// One task: the levels and layers of block `c` of rows. Levels are computed just before
    /// the first layer that needs them, so a level's input rows are still in cache when its
    /// layers read them.
    fn run_chunk(&self, c: usize, job: ChunkJob<'_>, layers: &[Layer]) {
        #[cfg(target_arch = "x86_64")]
        if self.avx2 {
            #[allow(unsafe_code)]
            // SAFETY: `avx2` is true only where `is_x86_feature_detected!("avx2")` said the
            // processor has it, the one requirement of the `target_feature` function.
            unsafe {
                self.run_chunk_avx2(c, job, layers)
            };
            return;
        }
        self.run_chunk_baseline(c, job, layers);
    }

    /// [`Self::run_chunk_body`] compiled for the baseline of the target.
    #[inline(never)]
    fn run_chunk_baseline(&self, c: usize, job: ChunkJob<'_>, layers: &[Layer]) {
        self.run_chunk_body(c, job, layers);
    }

    /// [`Self::run_chunk_body`] compiled for AVX2: everything it calls is inlined into it, so
    /// that all of it is compiled with the feature.
    ///
    /// # Safety
    /// The processor must have AVX2.
    #[cfg(target_arch = "x86_64")]
    #[target_feature(enable = "avx2")]
    #[inline(never)]
    #[allow(unsafe_code)]
    unsafe fn run_chunk_avx2(&self, c: usize, job: ChunkJob<'_>, layers: &[Layer]) {
        self.run_chunk_body(c, job, layers);
    }

    #[inline(always)]
    fn run_chunk_body(&self, c: usize, mut job: ChunkJob<'_>, layers: &[Layer]) {
        let j0 = c * CHUNK_ROWS;
        let j1 = (j0 + CHUNK_ROWS).min(self.n_lat);
        let mut scratch = Scratch::new(self.n_lon);
        let n_z = self.n_levels_with_z();
        let mut next_level = 0;
        for (layer, rows) in layers.iter().zip(&mut job.layers) {
            while next_level < n_z.min(layer.top + 1) {
                self.level_block(next_level, j0..j1, &mut job.levels[next_level], &mut scratch);
                next_level += 1;
            }
            let geo = (n_z > 0).then(|| (&job.levels[layer.bottom], &job.levels[layer.top]));
            self.layer_block(*layer, j0..j1, rows, geo, &mut scratch);
        }
        while next_level < n_z {
            self.level_block(next_level, j0..j1, &mut job.levels[next_level], &mut scratch);
            next_level += 1;
        }
    }

    /// Geostrophic wind at level `k` on rows `rows`: u_g = −(g0/f) ∂Z/∂y, v_g = (g0/f) ∂Z/∂x.
    #[inline(always)]
    fn level_block(
        &self,
        k: usize,
        rows: std::ops::Range<usize>,
        out: &mut LevelRows<'_>,
        s: &mut Scratch,
    ) {
        let z3 = self.fields.geopotential_height().expect("levels are computed only with Z");
        let n = self.n_lon;
        let p = self.fields.levels().pa()[k];
        let g0 = self.cfg.constants.g0;
        let inv_a = 1.0 / self.cfg.constants.radius;
        let j0 = rows.start;
        for j in rows {
            let u_row = &mut out.u[(j - j0) * n..][..n];
            let v_row = &mut out.v[(j - j0) * n..][..n];
            if self.kind[j] != RowKind::Normal {
                u_row.fill(f32::NAN);
                v_row.fill(f32::NAN);
                continue;
            }
            let rs = self.fields.grid().row_stencil(j);
            let gf = g0 / self.coriolis[j];
            let at = |jj| level_row(&z3, self.n_lat, n, k, jj);
            let (zm, z0, zp) = (at(rs.minus), at(j), at(rs.plus));
            let dy = rs.inv_delta * inv_a;
            let dx = self.inv_a_cos[j];
            self.fill_below(j, p, Some(z0), &mut s.below);
            self.diff_row(z0, &mut s.dx_a);
            let (below, ddx) = (&s.below[..n], &s.dx_a[..n]);
            for i in 0..n {
                let centre = f64::from(z0[i]);
                let dzdx = ddx[i] * dx;
                let dzdy = (f64::from(zp[i]) - f64::from(zm[i])) * dy;
                // A wind is a vector: where a stencil point of either component is missing,
                // both are undefined.
                let bad = centre.is_nan() | (below[i] != 0) | dzdx.is_nan() | dzdy.is_nan();
                u_row[i] = keep_if32(!bad, (-gf * dzdy) as f32);
                v_row[i] = keep_if32(!bad, (gf * dzdx) as f32);
            }
        }
    }

    /// Every output of one layer on rows `rows`: the pointwise quantities of each row (and of
    /// the rows just outside, into scratch only), then the stencil quantities of each row once
    /// its neighbours are known.
    #[inline(always)]
    fn layer_block(
        &self,
        layer: Layer,
        rows: std::ops::Range<usize>,
        out: &mut LayerRows<'_>,
        geo: Option<(&LevelRows<'_>, &LevelRows<'_>)>,
        s: &mut Scratch,
    ) {
        let grid = self.fields.grid();
        let pw = Pointwise::new(self, layer);
        let mut next_row = rows.start.saturating_sub(1);
        for j in rows.clone() {
            let rs = grid.row_stencil(j);
            while next_row <= rs.plus {
                self.pointwise_row(&pw, next_row, &rows, out, s);
                next_row += 1;
            }
            self.stencil_row(&pw, j, rs, rows.start, out, geo, s);
        }
    }

    /// Pass 1 of row `r`: thickness (both methods), layer-mean temperature, N² and observed
    /// shear. Thickness and T̄ go to the ring, unblanked; when `r` is one of the task's rows,
    /// every pointwise output is written too, blanked below ground.
    #[inline(always)]
    fn pointwise_row(
        &self,
        pw: &Pointwise<'a>,
        r: usize,
        rows: &std::ops::Range<usize>,
        out: &mut LayerRows<'_>,
        s: &mut Scratch,
    ) {
        let n = self.n_lon;
        let c = &self.cfg.constants;
        let layer = pw.layer;
        let at = |a: &ArrayView3<'a, f32>, k| level_row(a, self.n_lat, n, k, r);
        let slot = (r % 3) * n;
        let th = &mut s.ring_h[slot..slot + n];
        let tb = &mut s.ring_t[slot..slot + n];
        let acc = &mut s.acc[..n];
        if let Some(t) = &pw.t {
            // Σ w_k T_v,k accumulated in f64, one level at a time (contiguous inner loops).
            acc.fill(0.0);
            for (k, &w) in (layer.bottom..=layer.top).zip(&pw.weights) {
                let tk = at(t, k);
                match &pw.q {
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
        }
        let hyps = pw.hyps;
        match &pw.z {
            Some(z) => {
                let (zb, zt) = (at(z, layer.bottom), at(z, layer.top));
                for ((h, &b), &t) in th.iter_mut().zip(zb).zip(zt) {
                    *h = (f64::from(t) - f64::from(b)) as f32;
                }
            }
            None => {
                for (h, &a) in th.iter_mut().zip(acc.iter()) {
                    *h = (hyps * a) as f32;
                }
            }
        }
        if pw.t.is_some() {
            for (x, &a) in tb.iter_mut().zip(acc.iter()) {
                *x = a as f32;
            }
        } else {
            // T̄ implied by the geopotential thickness.
            for (x, &h) in tb.iter_mut().zip(th.iter()) {
                *x = (f64::from(h) / hyps) as f32;
            }
        }
        if !rows.contains(&r) {
            return;
        }
        let z_b = pw.z.as_ref().map(|z| at(z, layer.bottom));
        self.fill_below(r, pw.pb, z_b, &mut s.below);
        let below = &s.below[..n];
        let o = (r - rows.start) * n;
        let blank = |dst: &mut [f32], src: &[f32]| {
            for ((d, &v), &m) in dst.iter_mut().zip(src).zip(below) {
                *d = keep_if32(m == 0, v);
            }
        };
        blank(&mut out.thickness[o..o + n], th);
        blank(&mut out.tbar[o..o + n], tb);
        if let Some(row) = out.thickness_t.as_deref_mut() {
            for ((x, &a), &m) in row[o..o + n].iter_mut().zip(acc.iter()).zip(below) {
                *x = keep_if32(m == 0, (hyps * a) as f32);
            }
        }
        if let (Some(row), Some(t)) = (out.n2.as_deref_mut(), &pw.t) {
            let (t_b, t_t) = (at(t, layer.bottom), at(t, layer.top));
            let (fb, ft, g0) = (pw.theta_b_factor, pw.theta_t_factor, c.g0);
            let row = &mut row[o..o + n];
            for i in 0..n {
                let theta_b = f64::from(t_b[i]) * fb;
                let theta_t = f64::from(t_t[i]) * ft;
                let dz = f64::from(th[i]);
                let n2 = 2.0 * g0 / (theta_b + theta_t) * (theta_t - theta_b) / dz;
                row[i] = keep_if32((dz > 0.0) & (below[i] == 0), n2 as f32);
            }
        }
        if let (Some((ur, vr)), Some((u, v))) = (out.obs.as_mut(), &pw.wind) {
            for (dst, a) in [(&mut ur[o..o + n], u), (&mut vr[o..o + n], v)] {
                let (b, t) = (at(a, layer.bottom), at(a, layer.top));
                for (((x, &b), &t), &m) in dst.iter_mut().zip(b).zip(t).zip(below) {
                    *x = keep_if32(m == 0, t - b);
                }
            }
        }
    }

    /// Pass 2 of row `j`: every quantity that needs a horizontal derivative, and the mask
    /// reasons. Reads the thickness and T̄ of rows `rs.minus..=rs.plus` from the ring.
    #[allow(clippy::too_many_arguments)]
    #[inline(always)]
    fn stencil_row(
        &self,
        pw: &Pointwise<'a>,
        j: usize,
        rs: Stencil,
        j0: usize,
        out: &mut LayerRows<'_>,
        geo: Option<(&LevelRows<'_>, &LevelRows<'_>)>,
        s: &mut Scratch,
    ) {
        let n = self.n_lon;
        let c = &self.cfg.constants;
        let o = (j - j0) * n;
        let kind = self.kind[j];
        let z_b = pw.z.as_ref().map(|z| level_row(z, self.n_lat, n, pw.layer.bottom, j));
        self.fill_below(j, pw.pb, z_b, &mut s.below);
        let mask = &mut out.mask[o..o + n];
        let outputs = [
            &mut out.ut[o..o + n],
            &mut out.vt[o..o + n],
            &mut out.grad[o..o + n],
            &mut out.b[o..o + n],
            &mut out.c[o..o + n],
        ];
        if kind == RowKind::Pole {
            // Every derivative is undefined on a pole row.
            for (m, &below) in mask.iter_mut().zip(&s.below) {
                let reason = if below != 0 { MaskReason::BelowGround } else { MaskReason::Pole };
                *m = reason as u8;
            }
            for row in outputs.into_iter().chain(
                [&mut out.ratio, &mut out.adv, &mut out.turn, &mut out.eady]
                    .into_iter()
                    .filter_map(|r| r.as_deref_mut())
                    .map(|r| &mut r[o..o + n]),
            ) {
                row.fill(f32::NAN);
            }
            if let Some((u, v)) = out.ageo.as_mut() {
                u[o..o + n].fill(f32::NAN);
                v[o..o + n].fill(f32::NAN);
            }
            return;
        }
        let [ut_out, vt_out, grad_out, b_out, c_out] = outputs;
        // Row `r` of a ring of three rows.
        let slot = |r: usize| (r % 3) * n..(r % 3 + 1) * n;
        let (hm, h0, hp) =
            (&s.ring_h[slot(rs.minus)], &s.ring_h[slot(j)], &s.ring_h[slot(rs.plus)]);
        let (tm, t0, tp) =
            (&s.ring_t[slot(rs.minus)], &s.ring_t[slot(j)], &s.ring_t[slot(rs.plus)]);
        self.diff_row(h0, &mut s.dx_a);
        self.diff_row(t0, &mut s.dx_b);
        let (dh_dlam, dt_dlam, below) = (&s.dx_a[..n], &s.dx_b[..n], &s.below[..n]);
        let dy = rs.inv_delta / c.radius;
        let dx = self.inv_a_cos[j];
        let f = self.coriolis[j];
        let f_abs = f.abs();
        let gf = c.g0 / f;
        let g0 = c.g0;
        let balance = kind == RowKind::Normal;
        let nan = &s.nan[..n];
        let (gub, gvb, gut, gvt) = match geo {
            Some((b, t)) => (&b.u[o..o + n], &b.v[o..o + n], &t.u[o..o + n], &t.v[o..o + n]),
            None => (nan, nan, nan, nan),
        };
        let n2 = out.n2.as_deref().map_or(nan, |r| &r[o..o + n]);
        let (ou, ov) = out.obs.as_ref().map_or((nan, nan), |(u, v)| (&u[o..o + n], &v[o..o + n]));
        // Absent outputs are written to scratch rows and dropped, so that the loop below has
        // no branch on which outputs exist.
        let [s0, s1, s2, s3, s4, s5] = &mut s.sink;
        let ratio_out = out.ratio.as_deref_mut().map_or(&mut s0[..n], |r| &mut r[o..o + n]);
        let adv_out = out.adv.as_deref_mut().map_or(&mut s1[..n], |r| &mut r[o..o + n]);
        let turn_out = out.turn.as_deref_mut().map_or(&mut s2[..n], |r| &mut r[o..o + n]);
        let eady_out = out.eady.as_deref_mut().map_or(&mut s3[..n], |r| &mut r[o..o + n]);
        let (au_out, av_out) = match out.ageo.as_mut() {
            Some((u, v)) => (&mut u[o..o + n], &mut v[o..o + n]),
            None => (&mut s4[..n], &mut s5[..n]),
        };
        let consts = RowConstants { dx, dy, gf, f_abs, g0, balance };
        let ins = StencilIn {
            t0,
            tm,
            tp,
            h0,
            hm,
            hp,
            dt_dlam,
            dh_dlam,
            below,
            gub,
            gvb,
            gut,
            gvt,
            n2,
            ou,
            ov,
        };
        let mut outs = StencilOut {
            ut: ut_out,
            vt: vt_out,
            grad: grad_out,
            b: b_out,
            c: c_out,
            ratio: ratio_out,
            adv: adv_out,
            turn: turn_out,
            eady: eady_out,
            au: au_out,
            av: av_out,
            mask,
        };
        for i0 in (0..n).step_by(LANES) {
            stencil_block(i0, LANES.min(n - i0), &consts, &ins, &mut outs, &mut s.lanes, self.avx2);
        }
    }

    /// ∂F/∂λ (per radian) of one row at every column: centred inside (a contiguous loop),
    /// by the grid's stencil at the two edge columns (wrapping or one-sided).
    #[inline(always)]
    fn diff_row(&self, row: &[f32], out: &mut [f64]) {
        let n = self.n_lon;
        if n > 2 {
            let inner = out[1..n - 1].iter_mut().zip(&self.col_inv_delta[1..n - 1]);
            for ((d, &w), (&p, &m)) in inner.zip(row[2..].iter().zip(&row[..n - 2])) {
                *d = (f64::from(p) - f64::from(m)) * w;
            }
        }
        let cols = self.fields.grid().col_stencils();
        for i in [0, n - 1] {
            out[i] = diff(row, cols[i]);
        }
    }

    /// 1 in `out` where the cell of row `j` lies under the surface at pressure `p` (Pa), where
    /// the geopotential height at that pressure is `z` (absent: unknown). Surface pressure
    /// decides when present, surface height otherwise.
    #[inline(always)]
    fn fill_below(&self, j: usize, p: f64, z: Option<&[f32]>, out: &mut [u8]) {
        let n = self.n_lon;
        let out = &mut out[..n];
        if let Some(ps) = self.fields.surface_pressure() {
            for (o, &ps) in out.iter_mut().zip(row(&ps, j)) {
                let ps = f64::from(ps);
                *o = u8::from(ps.is_finite() & (p > ps));
            }
        } else if let (Some(zs), Some(z)) = (self.fields.surface_height(), z) {
            for ((o, &zs), &z) in out.iter_mut().zip(row(&zs, j)).zip(z) {
                let (zs, z) = (f64::from(zs), f64::from(z));
                *o = u8::from(zs.is_finite() & z.is_finite() & (z < zs));
            }
        } else {
            out.fill(0);
        }
    }
}

/// Cells per block of the stencil: the inputs of a block are copied into local arrays, worked
/// on lane by lane and copied out, so the compiler can use vector instructions without
/// proving that the many input and output rows do not overlap. Long enough that the lane loop
/// stays a loop (and is vectorised as one) rather than being unrolled.
const LANES: usize = 64;

/// What a stencil row's cells share.
struct RowConstants {
    /// 1 / (a cos φ).
    dx: f64,
    /// 1 / (a Δφ) of the row's stencil.
    dy: f64,
    /// g0 / f.
    gf: f64,
    /// |f|.
    f_abs: f64,
    g0: f64,
    /// Whether balance-based quantities are defined on this row (outside the equatorial band).
    balance: bool,
}

/// The input rows of one stencil row: thickness and T̄ of the row and its two neighbours, their
/// zonal differences, the below-ground flags, the geostrophic winds at the bottom and top
/// levels, N² and the observed shear (NaN rows where absent).
struct StencilIn<'a> {
    t0: &'a [f32],
    tm: &'a [f32],
    tp: &'a [f32],
    h0: &'a [f32],
    hm: &'a [f32],
    hp: &'a [f32],
    dt_dlam: &'a [f64],
    dh_dlam: &'a [f64],
    below: &'a [u8],
    gub: &'a [f32],
    gvb: &'a [f32],
    gut: &'a [f32],
    gvt: &'a [f32],
    n2: &'a [f32],
    ou: &'a [f32],
    ov: &'a [f32],
}

/// The output rows of one stencil row (scratch rows stand in for absent outputs).
struct StencilOut<'a> {
    ut: &'a mut [f32],
    vt: &'a mut [f32],
    grad: &'a mut [f32],
    b: &'a mut [f32],
    c: &'a mut [f32],
    ratio: &'a mut [f32],
    adv: &'a mut [f32],
    turn: &'a mut [f32],
    eady: &'a mut [f32],
    au: &'a mut [f32],
    av: &'a mut [f32],
    mask: &'a mut [u8],
}

/// The working arrays of one block of the stencil, kept by a task from block to block.
struct Lanes {
    t0: [f64; LANES],
    tm: [f64; LANES],
    tp: [f64; LANES],
    h0: [f64; LANES],
    hm: [f64; LANES],
    hp: [f64; LANES],
    dt_dlam: [f64; LANES],
    dh_dlam: [f64; LANES],
    below: [u8; LANES],
    gub: [f64; LANES],
    gvb: [f64; LANES],
    gut: [f64; LANES],
    gvt: [f64; LANES],
    n2: [f64; LANES],
    ou: [f64; LANES],
    ov: [f64; LANES],
    grad: [f64; LANES],
    b: [f64; LANES],
    ut: [f64; LANES],
    vt: [f64; LANES],
    c: [f64; LANES],
    ratio: [f64; LANES],
    adv: [f64; LANES],
    turn: [f64; LANES],
    eady: [f64; LANES],
    au: [f64; LANES],
    av: [f64; LANES],
    mask: [u8; LANES],
}

impl Lanes {
    fn new() -> Box<Self> {
        let z = [0.0; LANES];
        Box::new(Self {
            t0: z,
            tm: z,
            tp: z,
            h0: z,
            hm: z,
            hp: z,
            dt_dlam: z,
            dh_dlam: z,
            below: [0; LANES],
            gub: z,
            gvb: z,
            gut: z,
            gvt: z,
            n2: z,
            ou: z,
            ov: z,
            grad: z,
            b: z,
            ut: z,
            vt: z,
            c: z,
            ratio: z,
            adv: z,
            turn: z,
            eady: z,
            au: z,
            av: z,
            mask: [0; LANES],
        })
    }
}

/// Copies `dst.len()` values of a row from column `i0`, widened to `f64`.
#[inline(always)]
fn load(dst: &mut [f64], row: &[f32], i0: usize) {
    let len = dst.len();
    for (x, &v) in dst.iter_mut().zip(&row[i0..i0 + len]) {
        *x = f64::from(v);
    }
}

/// Stores `src.len()` values narrowed to `f32` into a row from column `i0`.
#[inline(always)]
fn store(row: &mut [f32], i0: usize, src: &[f64]) {
    for (r, &v) in row[i0..i0 + src.len()].iter_mut().zip(src) {
        *r = v as f32;
    }
}

/// `x` where `c` holds, NaN elsewhere, chosen by integer operations on the bits: unlike a
/// select between two floating-point values, they leave the loops that use them vectorisable.
#[inline(always)]
fn keep_if(c: bool, x: f64) -> f64 {
    let keep = u64::from(c).wrapping_neg();
    f64::from_bits((x.to_bits() & keep) | (f64::NAN.to_bits() & !keep))
}

/// [`keep_if`] for `f32`.
#[inline(always)]
fn keep_if32(c: bool, x: f32) -> f32 {
    let keep = u32::from(c).wrapping_neg();
    f32::from_bits((x.to_bits() & keep) | (f32::NAN.to_bits() & !keep))
}

/// Pass 2 at the `len` (at most [`LANES`]) cells of a row from column `i0`: every quantity
/// that needs a horizontal derivative, and the mask reason of each cell.
#[inline(always)]
fn stencil_block(
    i0: usize,
    len: usize,
    k: &RowConstants,
    r: &StencilIn<'_>,
    o: &mut StencilOut<'_>,
    w: &mut Lanes,
    avx2: bool,
) {
    // Tells the compiler that every lane index below is in bounds.
    let len = len.min(LANES);
    let span = i0..i0 + len;
    for (dst, src) in [
        (&mut w.t0, r.t0),
        (&mut w.tm, r.tm),
        (&mut w.tp, r.tp),
        (&mut w.h0, r.h0),
        (&mut w.hm, r.hm),
        (&mut w.hp, r.hp),
        (&mut w.gub, r.gub),
        (&mut w.gvb, r.gvb),
        (&mut w.gut, r.gut),
        (&mut w.gvt, r.gvt),
        (&mut w.n2, r.n2),
        (&mut w.ou, r.ou),
        (&mut w.ov, r.ov),
    ] {
        load(&mut dst[..len], src, i0);
    }
    w.dt_dlam[..len].copy_from_slice(&r.dt_dlam[span.clone()]);
    w.dh_dlam[..len].copy_from_slice(&r.dh_dlam[span.clone()]);
    w.below[..len].copy_from_slice(&r.below[span.clone()]);
    #[cfg(target_arch = "x86_64")]
    if avx2 {
        #[allow(unsafe_code)]
        // SAFETY: `avx2` comes from `Context::avx2`, true only where the processor has AVX2.
        unsafe {
            stencil_lanes_avx2(len, k, w)
        };
    } else {
        stencil_lanes(len, k, w);
    }
    #[cfg(not(target_arch = "x86_64"))]
    {
        let _ = avx2;
        stencil_lanes(len, k, w);
    }
    for (dst, src) in [
        (&mut *o.grad, &w.grad),
        (&mut *o.b, &w.b),
        (&mut *o.ut, &w.ut),
        (&mut *o.vt, &w.vt),
        (&mut *o.c, &w.c),
        (&mut *o.ratio, &w.ratio),
        (&mut *o.adv, &w.adv),
        (&mut *o.turn, &w.turn),
        (&mut *o.eady, &w.eady),
        (&mut *o.au, &w.au),
        (&mut *o.av, &w.av),
    ] {
        store(dst, i0, &src[..len]);
    }
    o.mask[span].copy_from_slice(&w.mask[..len]);
}

/// The arithmetic of [`stencil_block`] on its working arrays. A function of its own, kept out
/// of line: inlined into the much larger row loop, the lane loop was not vectorised.
#[inline(never)]
fn stencil_lanes(len: usize, k: &RowConstants, w: &mut Lanes) {
    stencil_lanes_body(len, k, w);
}

/// [`stencil_lanes`] compiled for AVX2.
///
/// # Safety
/// The processor must have AVX2.
#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2")]
#[inline(never)]
#[allow(unsafe_code)]
unsafe fn stencil_lanes_avx2(len: usize, k: &RowConstants, w: &mut Lanes) {
    stencil_lanes_body(len, k, w);
}

#[inline(always)]
fn stencil_lanes_body(len: usize, k: &RowConstants, w: &mut Lanes) {
    // Tells the compiler that every lane index below is in bounds.
    let len = len.min(LANES);
    // Every value is computed and then kept or made NaN (`keep_if`), without branches: a
    // loop of selects between floating-point values is not vectorised.
    for l in 0..len {
        let under = w.below[l] != 0;
        let tb = w.t0[l];
        // A missing T̄ at the cell removes its gradient too (physics.md: missing at the
        // point or at a stencil neighbour), although the centred stencil skips it.
        let t_ok = !tb.is_nan() & !under;
        let dtdx = keep_if(t_ok, w.dt_dlam[l] * k.dx);
        let dtdy = keep_if(t_ok, (w.tp[l] - w.tm[l]) * k.dy);
        let grad = (dtdx * dtdx + dtdy * dtdy).sqrt();
        w.grad[l] = grad;
        let torque = k.g0 / tb * grad;
        w.b[l] = torque;
        let dz = w.h0[l];
        let ddzdx = w.dh_dlam[l] * k.dx;
        let ddzdy = (w.hp[l] - w.hm[l]) * k.dy;
        // Both components or neither: a vector with one missing stencil point is
        // undefined as a whole.
        let defined = !(dz.is_nan() | ddzdx.is_nan() | ddzdy.is_nan());
        let ok = k.balance & !under;
        let ut = keep_if(ok & defined, -k.gf * ddzdy);
        let vt = keep_if(ok & defined, k.gf * ddzdx);
        w.ut[l] = ut;
        w.vt[l] = vt;
        let speed_t = (ut * ut + vt * vt).sqrt();
        let shear = speed_t / dz;
        let shear_per_m = keep_if(dz > 0.0, shear);
        let rot = k.f_abs * shear_per_m;
        w.c[l] = rot;
        let ratio = rot / torque;
        w.ratio[l] = keep_if(grad >= MIN_GRADIENT_FOR_RATIO, ratio);
        let (ub, vb, uu, vu) = (w.gub[l], w.gvb[l], w.gut[l], w.gvt[l]);
        let adv = -(0.5 * (ub + uu) * dtdx + 0.5 * (vb + vu) * dtdy);
        w.adv[l] = keep_if(ok, adv);
        let turn = ub * vu - vb * uu;
        w.turn[l] = keep_if(ok, turn);
        let n2 = w.n2[l];
        let eady = EADY_COEFFICIENT * k.f_abs * shear_per_m / n2.sqrt();
        w.eady[l] = keep_if(n2 > 0.0, eady);
        w.au[l] = w.ou[l] - ut;
        w.av[l] = w.ov[l] - vt;
    }
    // The mask reasons in a loop of their own, so that the one above stays vectorised.
    for l in 0..len {
        let reason = if w.ut[l].is_nan() | w.vt[l].is_nan() {
            MaskReason::Missing
        } else {
            MaskReason::Valid
        };
        let reason = if k.balance { reason } else { MaskReason::Equator };
        let reason = if w.below[l] != 0 { MaskReason::BelowGround } else { reason };
        w.mask[l] = reason as u8;
    }
}

/// What the pointwise pass of one layer needs, worked out once per layer and task.
struct Pointwise<'a> {
    layer: Layer,
    pb: f64,
    /// (R_d/g0) ln(p_b/p_t).
    hyps: f64,
    /// Trapezoid weights in ln p over the levels of the layer, normalised by ln(p_b/p_t).
    weights: Vec<f64>,
    theta_b_factor: f64,
    theta_t_factor: f64,
    z: Option<ArrayView3<'a, f32>>,
    t: Option<ArrayView3<'a, f32>>,
    q: Option<ArrayView3<'a, f32>>,
    wind: Option<(ArrayView3<'a, f32>, ArrayView3<'a, f32>)>,
}

impl<'a> Pointwise<'a> {
    fn new(ctx: &Context<'a>, layer: Layer) -> Self {
        let f = ctx.fields;
        let c = &ctx.cfg.constants;
        let pa = f.levels().pa();
        let (pb, pt) = (pa[layer.bottom], pa[layer.top]);
        let log_ratio = (pb / pt).ln();
        let weights = (layer.bottom..=layer.top)
            .map(|k| {
                let below = if k > layer.bottom { (pa[k - 1] / pa[k]).ln() } else { 0.0 };
                let above = if k < layer.top { (pa[k] / pa[k + 1]).ln() } else { 0.0 };
                0.5 * (below + above) / log_ratio
            })
            .collect();
        Self {
            layer,
            pb,
            hyps: c.r_dry / c.g0 * log_ratio,
            weights,
            theta_b_factor: (c.p_ref / pb).powf(c.kappa()),
            theta_t_factor: (c.p_ref / pt).powf(c.kappa()),
            z: f.geopotential_height(),
            t: f.temperature(),
            q: f.specific_humidity(),
            wind: f.wind(),
        }
    }
}

/// Row `j` of level `k` of a `[level, lat, lon]` array in standard layout.
#[inline(always)]
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
#[inline(always)]
fn row<'a>(a: &ArrayView2<'a, f32>, j: usize) -> &'a [f32] {
    let n = a.ncols();
    &a.to_slice().expect("kernel arrays are in standard layout")[j * n..(j + 1) * n]
}

/// ∂F/∂λ along a row (per radian) at the column of `s`.
#[inline(always)]
fn diff(row: &[f32], s: Stencil) -> f64 {
    (f64::from(row[s.plus]) - f64::from(row[s.minus])) * s.inv_delta
}
