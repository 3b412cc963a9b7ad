//! The layer map: thickness contours at a fixed interval, thermal-wind arrows on a decimated
//! grid, baroclinic zones shaded by the magnitude of the layer-mean temperature gradient, and
//! a latitude–longitude graticule.
//!
//! The projection is equirectangular: longitude linear in x (west at left), latitude linear in
//! y (north at top), with the aspect ratio of the map's middle latitude (one degree of
//! latitude as tall as 1/cos φ degrees of longitude are wide there), so that arrows drawn in
//! the picture's own x/y point the way the wind blows near the middle of the map. Longitudes
//! are unwrapped: a box across the antimeridian is one continuous picture whose east edge
//! lies past 180°.
//!
//! Masked cells (NaN) stay blank: no shading, no arrow, and no contour through a cell with a
//! masked corner.
//!
//! # DOM contract
//!
//! - Root `<svg>` with `viewBox`, `width`, `height`, `class="layer-map"` and
//!   `data-bbox="W,S,E,N"`: the plotted extent in degrees, W < E (E may exceed 180 across
//!   the antimeridian). A `<title>`; one `<text class="caution">`.
//! - `<rect id="plot-area" x y width height fill="none">`: the data frame in SVG user units,
//!   west at `x`, east at `x + width`, north at `y`, south at `y + height`.
//! - One `<g class="arrow" data-lat data-lon data-speed>` per drawn thermal-wind arrow
//!   (`data-lon` in the unwrapped longitudes of `data-bbox`; `data-speed` in m s⁻¹), one
//!   `<g class="reference-arrow" data-speed>`.
//! - Thickness contours in `<g class="contour" data-value="Z">`, labels
//!   `<text class="contour-label" data-value="Z">Z</text>` (metres).
//! - `<g class="shading">` (one rectangle per run of cells of one shade), `<g
//!   class="colour-bar">`, `<g class="graticule">`.

use std::ops::Range;

use ndarray::{ArrayView2, Axis, CowArray, Ix2, s};
use plotters::prelude::*;
use shearbox_core::{Grid, LayerDiagnostics, Levels};

use crate::contours::{ContourLine, contour_lines, levels};
use crate::labels::{lat_label, lon_label};
use crate::palette;
use crate::svg::{Frame, HPos, Segment, Sheet, VPos, anchored, font, num, px};
use crate::{Caption, RenderError};

/// Thickness contour interval, metres: 60 m (6 dam), the interval common practice uses on
/// 1000–500 hPa thickness charts.
pub const DEFAULT_CONTOUR_INTERVAL_M: f64 = 60.0;
/// The automatic stride aims at about this many arrows along the longer side of the map.
pub const TARGET_ARROWS_PER_SIDE: usize = 25;
/// At most this many arrow cells in one map (after decimation).
pub const MAX_ARROWS: usize = 5000;
/// Edges of the shading classes of |∇T̄|, K per 100 km; below the first edge is the palest
/// class, at or above the last the darkest. A sharp front reaches 2–5 K per 100 km.
pub const GRADIENT_BINS_K_PER_100KM: [f64; 7] = [0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0];

/// Shading cells are merged into blocks at least this many pixels wide and tall.
const MIN_SHADE_PX: f64 = 2.0;
const WIDTH: u32 = 1000;
const LEFT: i32 = 70;
const PLOT_W: i32 = 780;
const TOP: i32 = 84;
const BOTTOM_BAND: i32 = 112;
const COLOUR_BAR_X: i32 = 884;
/// Reference speeds to choose from, m s⁻¹.
const NICE_SPEEDS: [f64; 15] =
    [1.0, 2.0, 5.0, 10.0, 15.0, 20.0, 25.0, 30.0, 40.0, 50.0, 60.0, 80.0, 100.0, 150.0, 200.0];
/// Graticule steps to choose from, degrees.
const GRATICULE_STEPS: [f64; 9] = [1.0, 2.0, 5.0, 10.0, 15.0, 20.0, 30.0, 45.0, 60.0];

/// What a map shows besides its data.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct MapOptions {
    /// Every `stride`-th row and column gets an arrow, from the south-west cell; `None`:
    /// [`default_stride`].
    pub stride: Option<usize>,
    /// Thickness contour interval, metres.
    pub contour_interval_m: f64,
}

impl Default for MapOptions {
    fn default() -> Self {
        Self { stride: None, contour_interval_m: DEFAULT_CONTOUR_INTERVAL_M }
    }
}

/// The stride that leaves about [`TARGET_ARROWS_PER_SIDE`] arrows along the longer side of a
/// `rows` × `cols` map.
pub fn default_stride(rows: usize, cols: usize) -> usize {
    rows.max(cols).div_ceil(TARGET_ARROWS_PER_SIDE).max(1)
}

/// One layer's gridded fields, with coordinates: what a map is drawn from.
#[derive(Debug, Clone)]
pub struct LayerField<'a> {
    lat: Vec<f64>,
    lon: Vec<f64>,
    thickness: CowArray<'a, f32, Ix2>,
    thermal_wind_u: CowArray<'a, f32, Ix2>,
    thermal_wind_v: CowArray<'a, f32, Ix2>,
    temperature_gradient: CowArray<'a, f32, Ix2>,
    layer_hpa: (f64, f64),
}

impl<'a> LayerField<'a> {
    /// A layer's fields on `lat` (degrees, strictly increasing) × `lon` (degrees, increasing
    /// modulo 360°; unwrapped here). `thickness` in gpm, thermal wind in m s⁻¹, temperature
    /// gradient magnitude in K m⁻¹, all `[lat, lon]` with NaN where undefined; `layer_hpa` is
    /// (bottom, top).
    pub fn new(
        lat: &[f64],
        lon: &[f64],
        thickness: ArrayView2<'a, f32>,
        thermal_wind: (ArrayView2<'a, f32>, ArrayView2<'a, f32>),
        temperature_gradient: ArrayView2<'a, f32>,
        layer_hpa: (f64, f64),
    ) -> Result<Self, RenderError> {
        let expected = (lat.len(), lon.len());
        if lat.is_empty() || lon.is_empty() {
            return Err(RenderError::BadCoordinates {
                axis: if lat.is_empty() { "latitude" } else { "longitude" },
                reason: "no coordinate given; a map needs at least one cell".into(),
            });
        }
        for (what, a) in [
            ("thickness", &thickness),
            ("thermal wind u", &thermal_wind.0),
            ("thermal wind v", &thermal_wind.1),
            ("temperature gradient", &temperature_gradient),
        ] {
            if a.dim() != expected {
                return Err(RenderError::ShapeMismatch { what, expected, got: a.dim() });
            }
        }
        if lat.iter().any(|v| !v.is_finite() || v.abs() > 90.0)
            || lat.windows(2).any(|w| w[1] <= w[0])
        {
            return Err(RenderError::BadCoordinates {
                axis: "latitude",
                reason: "latitudes must be finite, within ±90° and strictly increasing".into(),
            });
        }
        Ok(Self {
            lat: lat.to_vec(),
            lon: unwrap_lon(lon)?,
            thickness: thickness.into(),
            thermal_wind_u: thermal_wind.0.into(),
            thermal_wind_v: thermal_wind.1.into(),
            temperature_gradient: temperature_gradient.into(),
            layer_hpa,
        })
    }

    /// The fields of one layer of the kernel's output on the grid it was computed on.
    pub fn from_diagnostics(
        grid: &Grid,
        levels: &Levels,
        layer: &'a LayerDiagnostics,
    ) -> Result<Self, RenderError> {
        let hpa = |k: usize| {
            levels.pa().get(k).map(|p| p / 100.0).ok_or_else(|| RenderError::BadCoordinates {
                axis: "level",
                reason: format!("the layer names level {k}, which the levels lack"),
            })
        };
        let layer_hpa = (hpa(layer.layer.bottom)?, hpa(layer.layer.top)?);
        Self::new(
            grid.lat(),
            grid.lon(),
            layer.thickness.view(),
            (layer.thermal_wind_u.view(), layer.thermal_wind_v.view()),
            layer.temperature_gradient.view(),
            layer_hpa,
        )
    }

    /// The cells of rows `rows` and of columns `cols`, in that order (for instance a box
    /// inside the block read with its halo, whose columns may wrap around a periodic grid).
    /// The longitudes are unwrapped again in the new order.
    pub fn select(
        &self,
        rows: Range<usize>,
        cols: &[usize],
    ) -> Result<LayerField<'static>, RenderError> {
        let (n_lat, n_lon) = (self.lat.len(), self.lon.len());
        if rows.is_empty()
            || cols.is_empty()
            || rows.end > n_lat
            || cols.iter().any(|&i| i >= n_lon)
        {
            return Err(RenderError::BadCoordinates {
                axis: "selection",
                reason: format!(
                    "rows {rows:?} and {} columns up to {:?} are not a non-empty block of the \
                     {n_lat} × {n_lon} grid",
                    cols.len(),
                    cols.iter().max()
                ),
            });
        }
        let cut = |a: &CowArray<'a, f32, Ix2>| -> CowArray<'static, f32, Ix2> {
            a.slice(s![rows.clone(), ..]).select(Axis(1), cols).into()
        };
        let lon: Vec<f64> = cols.iter().map(|&i| self.lon[i]).collect();
        Ok(LayerField {
            lat: self.lat[rows.clone()].to_vec(),
            lon: unwrap_lon(&lon)?,
            thickness: cut(&self.thickness),
            thermal_wind_u: cut(&self.thermal_wind_u),
            thermal_wind_v: cut(&self.thermal_wind_v),
            temperature_gradient: cut(&self.temperature_gradient),
            layer_hpa: self.layer_hpa,
        })
    }

    /// Latitudes, degrees, south to north.
    pub fn lat(&self) -> &[f64] {
        &self.lat
    }

    /// Longitudes, degrees, unwrapped (strictly increasing, the first within −180..180).
    pub fn lon(&self) -> &[f64] {
        &self.lon
    }

    /// Rows and columns.
    pub fn dim(&self) -> (usize, usize) {
        (self.lat.len(), self.lon.len())
    }

    /// The plotted extent `[W, S, E, N]`: the cells' centres and half a spacing beyond
    /// (latitudes kept within ±90°).
    pub fn extent(&self) -> [f64; 4] {
        let (lon_edges, lat_edges) = (edges(&self.lon), edges(&self.lat));
        [
            lon_edges[0],
            lat_edges[0].max(-90.0),
            lon_edges[lon_edges.len() - 1],
            lat_edges[lat_edges.len() - 1].min(90.0),
        ]
    }

    /// The arrow cells at `stride`: every `stride`-th row and column from the south-west
    /// cell where the thermal wind is defined, as (row, column).
    pub fn arrow_cells(&self, stride: usize) -> Vec<(usize, usize)> {
        let (rows, cols) = self.dim();
        let stride = stride.max(1);
        (0..rows)
            .step_by(stride)
            .flat_map(|j| (0..cols).step_by(stride).map(move |i| (j, i)))
            .filter(|&(j, i)| {
                self.thermal_wind_u[[j, i]].is_finite() && self.thermal_wind_v[[j, i]].is_finite()
            })
            .collect()
    }
}

/// Longitudes increasing modulo 360°, made strictly increasing, the first within −180..180.
fn unwrap_lon(lon: &[f64]) -> Result<Vec<f64>, RenderError> {
    let bad = |reason: String| RenderError::BadCoordinates { axis: "longitude", reason };
    if lon.iter().any(|v| !v.is_finite()) {
        return Err(bad("longitudes must be finite".into()));
    }
    let first = (lon[0] + 180.0).rem_euclid(360.0) - 180.0;
    let mut out = vec![first];
    for w in lon.windows(2) {
        let step = (w[1] - w[0]).rem_euclid(360.0);
        if step <= 0.0 {
            return Err(bad(format!("{} follows {}: not increasing", w[1], w[0])));
        }
        out.push(out[out.len() - 1] + step);
    }
    if out[out.len() - 1] - out[0] >= 360.0 {
        return Err(bad("the longitudes go round the circle more than once".into()));
    }
    Ok(out)
}

/// Cell edges of centres `c`: midpoints, and half a spacing beyond the ends (one degree wide
/// for a single centre).
fn edges(c: &[f64]) -> Vec<f64> {
    let n = c.len();
    if n == 1 {
        return vec![c[0] - 0.5, c[0] + 0.5];
    }
    let mut e = Vec::with_capacity(n + 1);
    e.push(c[0] - 0.5 * (c[1] - c[0]));
    e.extend(c.windows(2).map(|w| 0.5 * (w[0] + w[1])));
    e.push(c[n - 1] + 0.5 * (c[n - 1] - c[n - 2]));
    e
}

/// The value at fractional index `x` of increasing coordinates `c`.
fn at_index(c: &[f64], x: f64) -> f64 {
    if c.len() == 1 {
        return c[0];
    }
    let k = (x.floor().max(0.0) as usize).min(c.len() - 2);
    c[k] + (x - k as f64) * (c[k + 1] - c[k])
}

/// The shading class of a gradient in K per 100 km.
fn gradient_class(k_per_100km: f64) -> usize {
    GRADIENT_BINS_K_PER_100KM.iter().filter(|&&edge| k_per_100km >= edge).count()
}

/// The layer map of `field` as an SVG document.
pub fn map_svg(
    field: &LayerField<'_>,
    caption: &Caption<'_>,
    options: &MapOptions,
) -> Result<String, RenderError> {
    let interval = options.contour_interval_m;
    if !(interval.is_finite() && interval > 0.0) {
        return Err(RenderError::BadOption {
            option: "contour interval",
            value: interval.to_string(),
            expected: "a positive number of metres",
        });
    }
    let (rows, cols) = field.dim();
    let stride = options.stride.unwrap_or_else(|| default_stride(rows, cols));
    if stride == 0 {
        return Err(RenderError::BadOption {
            option: "stride",
            value: "0".into(),
            expected: "a whole number of at least 1",
        });
    }
    let decimated = rows.div_ceil(stride) * cols.div_ceil(stride);
    if decimated > MAX_ARROWS {
        let fits = (stride..).find(|&s| rows.div_ceil(s) * cols.div_ceil(s) <= MAX_ARROWS);
        return Err(RenderError::TooManyArrows {
            stride,
            arrows: decimated,
            max: MAX_ARROWS,
            fits: fits.unwrap_or(rows.max(cols)),
        });
    }
    let contour_values = levels(field.thickness.view(), interval)?;

    let [west, south, east, north] = field.extent();
    let mid = (0.5 * (south + north)).to_radians().cos().max(0.2);
    let aspect = (north - south) / ((east - west) * mid);
    let plot_h = (f64::from(PLOT_W) * aspect).round().clamp(240.0, 900.0) as i32;
    let frame =
        Frame { px: (LEFT, TOP, LEFT + PLOT_W, TOP + plot_h), x: (west, east), y: (south, north) };
    let height = (TOP + plot_h + BOTTOM_BAND) as u32;
    let extent = format!("{},{},{},{}", num(west, 4), num(south, 4), num(east, 4), num(north, 4));
    let (bottom_hpa, top_hpa) = field.layer_hpa;
    let layer = format!("{}–{} hPa", num(bottom_hpa, 2), num(top_hpa, 2));

    let mut sheet = Sheet::new(
        (WIDTH, height),
        &format!("Layer map {layer}: {}, {}, extent {extent}", caption.dataset, caption.time),
    );
    sheet.root_attr("class", "layer-map");
    sheet.root_attr("data-bbox", extent);
    sheet.root_attr("data-bottom-hpa", num(bottom_hpa, 2));
    sheet.root_attr("data-top-hpa", num(top_hpa, 2));
    sheet.root_attr("data-stride", stride.to_string());
    sheet.root_attr("data-contour-interval-m", num(interval, 3));
    sheet.group(&[("class", "background".into())], |a| a.fill(&palette::PAPER))?;
    header(&mut sheet, field, caption, &layer)?;
    let (l, t, r, b) = frame.px;
    sheet.raw(&format!(
        "<defs><clipPath id=\"map-clip\"><rect x=\"{l}\" y=\"{t}\" width=\"{}\" \
         height=\"{}\"/></clipPath></defs>\n",
        r - l,
        b - t
    ));

    shading(&mut sheet, field, &frame)?;
    graticule(&mut sheet, &frame)?;
    let lines = contour_lines(field.thickness.view(), &contour_values)?;
    contours(&mut sheet, field, &frame, &lines, &contour_values)?;
    let reference = arrows(&mut sheet, field, &frame, stride)?;
    sheet.element("rect", &[("id", "plot-area".into())], |a| {
        a.draw(&Rectangle::new([(l, t), (r, b)], palette::INK.stroke_width(1)))
    })?;
    let nothing = [&field.thickness, &field.thermal_wind_u, &field.temperature_gradient]
        .iter()
        .all(|a| a.iter().all(|v| !v.is_finite()));
    if nothing {
        let style = anchored(font(14.0, palette::INK), HPos::Center, VPos::Center);
        sheet.element("text", &[("class", "note".into())], |a| {
            a.draw(&Text::new(
                "No defined value of this layer here: below ground, masked or missing.",
                ((l + r) / 2, (t + b) / 2),
                style,
            ))
        })?;
    }
    colour_bar(&mut sheet, &frame)?;
    footer(&mut sheet, &frame, reference, stride, interval, caption)?;
    Ok(sheet.finish())
}

fn header(
    sheet: &mut Sheet,
    field: &LayerField<'_>,
    caption: &Caption<'_>,
    layer: &str,
) -> Result<(), RenderError> {
    let [w, s, e, n] = field.extent();
    let (rows, cols) = field.dim();
    let title = format!(
        "Layer {layer}: thickness, thermal wind and temperature gradient — {}",
        caption.dataset
    );
    let time = if caption.time.is_empty() { "(no time coordinate)" } else { caption.time };
    let lons = if e - w >= 360.0 - 1e-9 {
        "all longitudes".to_string()
    } else {
        format!("{}–{}", lon_label(w), lon_label(e))
    };
    let sub =
        format!("{time} · {lons}, {}–{} · {rows} × {cols} grid cells", lat_label(s), lat_label(n));
    sheet.heading(title, sub)
}

/// Cells shaded by their gradient class; runs of one class along a row are one rectangle.
/// On a grid finer than [`MIN_SHADE_PX`] per cell, blocks of cells take the mean of their
/// defined values.
fn shading(sheet: &mut Sheet, field: &LayerField<'_>, frame: &Frame) -> Result<(), RenderError> {
    let (rows, cols) = field.dim();
    let (w_px, h_px) = frame.size_px();
    let kx = (MIN_SHADE_PX * cols as f64 / f64::from(w_px)).ceil().max(1.0) as usize;
    let ky = (MIN_SHADE_PX * rows as f64 / f64::from(h_px)).ceil().max(1.0) as usize;
    let (lon_edges, lat_edges) = (edges(field.lon()), edges(field.lat()));
    let clamp_lat = |v: f64| v.clamp(-90.0, 90.0);
    let mut rects: Vec<([(i32, i32); 2], usize)> = Vec::new();
    for j0 in (0..rows).step_by(ky) {
        let j1 = (j0 + ky).min(rows);
        let classes: Vec<Option<usize>> = (0..cols)
            .step_by(kx)
            .map(|i0| {
                let block = field.temperature_gradient.slice(s![j0..j1, i0..(i0 + kx).min(cols)]);
                let (sum, n) = block
                    .iter()
                    .filter(|v| v.is_finite())
                    .fold((0.0, 0usize), |(s, n), &v| (s + f64::from(v), n + 1));
                (n > 0).then(|| gradient_class(sum / n as f64 * 1e5))
            })
            .collect();
        let (y_south, y_north) = (clamp_lat(lat_edges[j0]), clamp_lat(lat_edges[j1]));
        let mut k = 0;
        while k < classes.len() {
            let Some(class) = classes[k] else {
                k += 1;
                continue;
            };
            let start = k;
            while k < classes.len() && classes[k] == Some(class) {
                k += 1;
            }
            let (i0, i1) = (start * kx, (k * kx).min(cols));
            let nw = px(frame.to_px(lon_edges[i0], y_north));
            let se = px(frame.to_px(lon_edges[i1], y_south));
            rects.push(([nw, se], class));
        }
    }
    sheet.group(&[("class", "shading".into())], |a| {
        for (corners, class) in &rects {
            a.draw(&Rectangle::new(*corners, palette::GRADIENT[*class].filled()))?;
        }
        Ok(())
    })
}

/// A graticule step leaving at most eight lines over `span` degrees.
fn graticule_step(span: f64) -> f64 {
    GRATICULE_STEPS.iter().copied().find(|s| span / s <= 8.0).unwrap_or(90.0)
}

fn multiples(lo: f64, hi: f64, step: f64) -> Vec<f64> {
    let first = (lo / step).ceil() as i64;
    let last = (hi / step).floor() as i64;
    (first..=last).map(|k| k as f64 * step).collect()
}

fn graticule(sheet: &mut Sheet, frame: &Frame) -> Result<(), RenderError> {
    let (x, y) = (frame.x, frame.y);
    let lons = multiples(x.0, x.1, graticule_step(x.1 - x.0));
    let lats = multiples(y.0, y.1, graticule_step(y.1 - y.0));
    let (l, _, _, b) = frame.px;
    let spec = frame.spec();
    let below = anchored(font(11.0, palette::INK), HPos::Center, VPos::Top);
    let left = anchored(font(11.0, palette::INK), HPos::Right, VPos::Center);
    sheet.group(&[("class", "graticule".into())], |a| {
        let area = a.apply_coord_spec(spec.clone());
        let style = palette::QUIET.mix(0.6).stroke_width(1);
        for &lon in &lons {
            area.draw(&Segment::new((lon, y.0), (lon, y.1), style))?;
            let (px_x, _) = px(frame.to_px(lon, y.0));
            a.draw(&Text::new(lon_label(lon), (px_x, b + 6), below.clone()))?;
        }
        for &lat in &lats {
            area.draw(&Segment::new((x.0, lat), (x.1, lat), style))?;
            let (_, px_y) = px(frame.to_px(x.0, lat));
            a.draw(&Text::new(lat_label(lat), (l - 6, px_y), left.clone()))?;
        }
        Ok(())
    })
}

fn contours(
    sheet: &mut Sheet,
    field: &LayerField<'_>,
    frame: &Frame,
    lines: &[ContourLine],
    values: &[f64],
) -> Result<(), RenderError> {
    let to_px =
        |(ci, rj): (f64, f64)| frame.to_px(at_index(field.lon(), ci), at_index(field.lat(), rj));
    let mut placed: Vec<(f64, f64)> = Vec::new();
    for &value in values {
        let pieces: Vec<Vec<(f64, f64)>> = lines
            .iter()
            .filter(|c| c.value == value)
            .map(|c| c.points.iter().map(|&p| to_px(p)).collect())
            .collect();
        if pieces.is_empty() {
            continue;
        }
        let text = num(value, 1);
        let paths: Vec<Vec<(i32, i32)>> =
            pieces.iter().map(|p| p.iter().map(|&q| px(q)).collect()).collect();
        sheet.group(&[("class", "contour".into()), ("data-value", text.clone())], |a| {
            for path in &paths {
                a.draw(&PathElement::new(path.clone(), palette::CONTOUR.stroke_width(1)))?;
            }
            Ok(())
        })?;
        // Labels along each piece long enough to carry one: one per 350 px, evenly
        // spaced, away from the labels already placed.
        for piece in &pieces {
            let length: f64 = piece.windows(2).map(|w| dist(w[0], w[1])).sum();
            if length < 90.0 {
                continue;
            }
            let count = ((length / 350.0).floor() as usize).max(1);
            for k in 0..count {
                let Some(at) = point_along(piece, (k as f64 + 0.5) * length / count as f64) else {
                    continue;
                };
                if placed.iter().any(|&p| dist(p, at) < 60.0) || !frame.holds_px(at) {
                    continue;
                }
                placed.push(at);
                let style = anchored(font(11.0, palette::CONTOUR), HPos::Center, VPos::Center);
                let attrs = [
                    ("class", "contour-label".into()),
                    ("data-value", text.clone()),
                    ("paint-order", "stroke".into()),
                    ("stroke", "#ffffff".into()),
                    ("stroke-width", "3".into()),
                ];
                let label = text.clone();
                sheet.element("text", &attrs, |a| a.draw(&Text::new(label, px(at), style)))?;
            }
        }
    }
    Ok(())
}

/// The vertex of `path` where the distance walked from its start first reaches `distance`.
fn point_along(path: &[(f64, f64)], distance: f64) -> Option<(f64, f64)> {
    let mut walked = 0.0;
    for w in path.windows(2) {
        walked += dist(w[0], w[1]);
        if walked >= distance {
            return Some(w[1]);
        }
    }
    path.last().copied()
}

fn dist(a: (f64, f64), b: (f64, f64)) -> f64 {
    (a.0 - b.0).hypot(a.1 - b.1)
}

/// The smallest reference speed from the nice ones at or above the 90th percentile of
/// `speeds` (10 m s⁻¹ when there is none).
fn reference_speed(speeds: &[f64]) -> f64 {
    if speeds.is_empty() {
        return 10.0;
    }
    let mut sorted = speeds.to_vec();
    sorted.sort_by(f64::total_cmp);
    let p90 = sorted[((sorted.len() - 1) as f64 * 0.9).round() as usize];
    NICE_SPEEDS.iter().copied().find(|&s| s >= p90).unwrap_or(NICE_SPEEDS[NICE_SPEEDS.len() - 1])
}

/// Pixel corners of an arrow: the shaft's two ends, the head's three corners.
type ArrowShape = ([(i32, i32); 2], [(i32, i32); 3]);

/// An arrow of `length` pixels centred on `c`, pointing along `dir` (a unit vector in
/// pixels, y down).
fn arrow_shape(c: (f64, f64), dir: (f64, f64), length: f64) -> ArrowShape {
    let half = 0.5 * length;
    let tail = (c.0 - dir.0 * half, c.1 - dir.1 * half);
    let tip = (c.0 + dir.0 * half, c.1 + dir.1 * half);
    let head = (0.4 * length).min(7.0);
    let base = (tip.0 - dir.0 * head, tip.1 - dir.1 * head);
    let side = (-dir.1 * 0.45 * head, dir.0 * 0.45 * head);
    (
        [px(tail), px(tip)],
        [px(tip), px((base.0 + side.0, base.1 + side.1)), px((base.0 - side.0, base.1 - side.1))],
    )
}

fn draw_arrow(
    a: &crate::svg::Area<'_>,
    c: (f64, f64),
    wind: (f64, f64),
    length: f64,
) -> crate::svg::DrawResult {
    let speed = wind.0.hypot(wind.1);
    if length < 2.0 || speed == 0.0 {
        return a.draw(&Circle::new(px(c), 1, palette::ARROW.filled()));
    }
    let dir = (wind.0 / speed, -wind.1 / speed);
    let (shaft, head) = arrow_shape(c, dir, length);
    a.draw(&Segment::new(shaft[0], shaft[1], palette::ARROW.stroke_width(1)))?;
    a.draw(&Polygon::new(head.to_vec(), palette::ARROW.filled()))
}

/// Draws the arrows and returns the reference speed and its length in pixels.
fn arrows(
    sheet: &mut Sheet,
    field: &LayerField<'_>,
    frame: &Frame,
    stride: usize,
) -> Result<(f64, f64), RenderError> {
    let cells = field.arrow_cells(stride);
    let wind = |(j, i): (usize, usize)| {
        (f64::from(field.thermal_wind_u[[j, i]]), f64::from(field.thermal_wind_v[[j, i]]))
    };
    let speeds: Vec<f64> = cells.iter().map(|&c| wind(c).0.hypot(wind(c).1)).collect();
    let reference = reference_speed(&speeds);
    let (rows, cols) = field.dim();
    let (w_px, h_px) = frame.size_px();
    let spacing =
        (f64::from(w_px) / cols as f64).min(f64::from(h_px) / rows as f64) * stride as f64;
    let ref_length = (0.9 * spacing).clamp(14.0, 60.0);
    sheet.raw("<g class=\"arrows\" clip-path=\"url(#map-clip)\">\n");
    for (&(j, i), &speed) in cells.iter().zip(&speeds) {
        let (lat, lon) = (field.lat()[j], field.lon()[i]);
        let attrs = [
            ("class", "arrow".into()),
            ("data-lat", num(lat, 4)),
            ("data-lon", num(lon, 4)),
            ("data-speed", num(speed, 2)),
        ];
        let c = frame.to_px(lon, lat);
        let length = speed / reference * ref_length;
        let w = wind((j, i));
        sheet.group(&attrs, |a| draw_arrow(a, c, w, length))?;
    }
    sheet.raw("</g>\n");
    Ok((reference, ref_length))
}

fn colour_bar(sheet: &mut Sheet, frame: &Frame) -> Result<(), RenderError> {
    let (_, t, _, b) = frame.px;
    let n = palette::GRADIENT.len() as i32;
    let box_h = ((b - t - 60).min(300) / n).max(12);
    let x = COLOUR_BAR_X;
    let top = t + 44;
    let text = anchored(font(11.0, palette::INK), HPos::Left, VPos::Center);
    let head = anchored(font(12.0, palette::INK), HPos::Left, VPos::Bottom);
    sheet.group(&[("class", "colour-bar".into())], |a| {
        a.draw(&Text::new("|∇T̄|, K per", (x - 4, top - 22), head.clone()))?;
        a.draw(&Text::new("100 km", (x - 4, top - 8), head.clone()))?;
        for k in 0..n {
            // The strongest class on top.
            let y0 = top + (n - 1 - k) * box_h;
            a.draw(&Rectangle::new(
                [(x, y0), (x + 22, y0 + box_h)],
                palette::GRADIENT[k as usize].filled(),
            ))?;
        }
        a.draw(&Rectangle::new(
            [(x, top), (x + 22, top + n * box_h)],
            palette::INK.stroke_width(1),
        ))?;
        for (k, edge) in GRADIENT_BINS_K_PER_100KM.iter().enumerate() {
            let y = top + (n - 1 - k as i32) * box_h;
            a.draw(&Text::new(num(*edge, 2), (x + 28, y), text.clone()))?;
        }
        let quiet = anchored(font(10.0, palette::QUIET), HPos::Left, VPos::Top);
        a.draw(&Text::new("blank: masked", (x - 4, top + n * box_h + 8), quiet))
    })
}

fn footer(
    sheet: &mut Sheet,
    frame: &Frame,
    (reference, ref_length): (f64, f64),
    stride: usize,
    interval: f64,
    caption: &Caption<'_>,
) -> Result<(), RenderError> {
    let (l, _, r, b) = frame.px;
    let y = b + 44;
    let cells = if stride == 1 {
        "in every cell".to_string()
    } else {
        format!("every {stride}{} cell", ordinal(stride))
    };
    let note = format!(
        "Contours: thickness every {} m (labels in m). Arrows: thermal wind, {cells}. \
         Shading: layer-mean temperature gradient.",
        num(interval, 2)
    );
    let quiet = anchored(font(11.0, palette::INK), HPos::Left, VPos::Center);
    sheet.element("text", &[("class", "note".into())], |a| {
        a.draw(&Text::new(note, (l, y), quiet))
    })?;
    let start = (f64::from(r) - ref_length - 90.0, f64::from(y) + 24.0);
    let centre = (start.0 + 0.5 * ref_length, start.1);
    let label = format!("{} m s⁻¹", num(reference, 1));
    let text = anchored(font(11.0, palette::INK), HPos::Left, VPos::Center);
    sheet.group(
        &[("class", "reference-arrow".into()), ("data-speed", num(reference, 2))],
        |a| {
            draw_arrow(a, centre, (reference, 0.0), ref_length)?;
            a.draw(&Text::new(label, (px(start).0 + ref_length as i32 + 8, px(start).1), text))
        },
    )?;
    let style = anchored(font(11.0, palette::INK), HPos::Left, VPos::Bottom);
    let caution = caption.caution.to_string();
    let height = b + BOTTOM_BAND;
    sheet.element("text", &[("class", "caution".into())], |a| {
        a.draw(&Text::new(caution, (16, height - 12), style))
    })
}

fn ordinal(n: usize) -> &'static str {
    match (n % 10, n % 100) {
        (_, 11..=13) => "th",
        (1, _) => "st",
        (2, _) => "nd",
        (3, _) => "rd",
        _ => "th",
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn longitudes_unwrap_across_the_antimeridian() {
        assert_eq!(
            unwrap_lon(&[170.0, 175.0, -180.0, -175.0]).unwrap(),
            [170.0, 175.0, 180.0, 185.0]
        );
        assert_eq!(unwrap_lon(&[350.0, 355.0, 0.0, 5.0]).unwrap(), [-10.0, -5.0, 0.0, 5.0]);
        assert!(unwrap_lon(&[0.0, 0.0]).is_err());
        assert!(unwrap_lon(&[0.0, f64::NAN]).is_err());
    }

    #[test]
    fn strides_and_classes() {
        assert_eq!(default_stride(121, 201), 9);
        assert_eq!(default_stride(10, 20), 1);
        assert_eq!(gradient_class(0.0), 0);
        assert_eq!(gradient_class(0.5), 1);
        assert_eq!(gradient_class(2.5), 4);
        assert_eq!(gradient_class(100.0), 7);
        assert_eq!(reference_speed(&[3.0, 4.0, 12.0]), 15.0);
        assert_eq!(ordinal(1), "st");
        assert_eq!(ordinal(12), "th");
        assert_eq!(ordinal(22), "nd");
    }
}
