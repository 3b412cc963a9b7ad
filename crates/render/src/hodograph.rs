//! The hodograph of a box: the box-mean geostrophic wind at each level as a point in the
//! (u, v) plane, joined bottom to top by the thermal wind of each layer, coloured by the sign
//! of the layer's box-mean thermal advection; the observed wind where the file has one; speed
//! rings around the origin.
//!
//! A layer's segment runs from the box-mean geostrophic wind at its bottom level to the one at
//! its top level, which is the layer's thermal wind (physics.md: with the geopotential method
//! V_T = V_g(top) − V_g(bottom)). A geostrophic wind that veers with height goes with warm
//! advection in the Northern Hemisphere, so the colours and the turning of the trace tell the
//! same story twice; where they disagree the data deserve a look.
//!
//! # DOM contract
//!
//! - Root `<svg>` with `viewBox`, `width`, `height`, `class="hodograph"`; a `<title>`; one
//!   `<text class="caution">`.
//! - One `<circle class="level" data-pressure-hpa="P">` per level that has a box-mean
//!   geostrophic wind, and one `<text class="level-label" data-pressure-hpa="P">` beside it.
//! - One `<line class="layer-segment" data-advection="warm|cold|neutral|unknown"
//!   data-bottom-hpa="B" data-top-hpa="T">` per layer whose two levels both have a box-mean
//!   geostrophic wind.
//! - `<g class="legend">`; speed rings `<circle class="speed-ring" data-speed-ms="S">`, each
//!   with one `<text class="ring-label" data-speed-ms="S">`.
//! - `<g class="observed" data-pressure-hpa="P">` per level with an observed wind.

use plotters::prelude::*;
use shearbox_core::{BoxProfile, LayerMeans, Vector};

use crate::labels::{box_label, box_numbers, hpa};
use crate::palette;
use crate::svg::{Frame, HPos, Segment, Sheet, VPos, anchored, font, num, px};
use crate::{Caption, RenderError};

/// Below this magnitude of box-mean thermal advection, K per day, a layer counts as
/// neutral: 0.1 K day⁻¹ is under the rounding of the published values and far below the
/// advection of any front worth the name (the project's choice).
pub const NEUTRAL_ADVECTION_K_PER_DAY: f64 = 0.1;

/// The class of a layer by its box-mean thermal advection.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Advection {
    /// Warm advection, at least [`NEUTRAL_ADVECTION_K_PER_DAY`].
    Warm,
    /// Cold advection, at least [`NEUTRAL_ADVECTION_K_PER_DAY`] in magnitude.
    Cold,
    /// Smaller in magnitude than [`NEUTRAL_ADVECTION_K_PER_DAY`].
    Neutral,
    /// Undefined (no geopotential, or no cell of the box where it is defined).
    Unknown,
}

impl Advection {
    /// The class of a layer's box-mean thermal advection (K s⁻¹ in [`LayerMeans`]).
    pub fn of(layer: &LayerMeans) -> Self {
        match layer.thermal_advection {
            None => Self::Unknown,
            Some(a) => {
                let per_day = a * 86_400.0;
                if !per_day.is_finite() {
                    Self::Unknown
                } else if per_day.abs() < NEUTRAL_ADVECTION_K_PER_DAY {
                    Self::Neutral
                } else if per_day > 0.0 {
                    Self::Warm
                } else {
                    Self::Cold
                }
            }
        }
    }

    /// The value of `data-advection`.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Warm => "warm",
            Self::Cold => "cold",
            Self::Neutral => "neutral",
            Self::Unknown => "unknown",
        }
    }

    fn colour(self) -> RGBColor {
        match self {
            Self::Warm => palette::WARM,
            Self::Cold => palette::COLD,
            Self::Neutral => palette::NEUTRAL,
            Self::Unknown => palette::UNKNOWN,
        }
    }
}

const WIDTH: u32 = 900;
const HEIGHT: u32 = 760;
/// The plotting square: left, top, right, bottom.
const PLOT: (i32, i32, i32, i32) = (60, 90, 660, 690);
const LEGEND_X: i32 = 690;
/// Speed-ring intervals to choose from, m s⁻¹.
const RING_STEPS: [f64; 7] = [2.0, 5.0, 10.0, 20.0, 25.0, 50.0, 100.0];

/// The hodograph of `profile` as an SVG document.
pub fn hodograph_svg(profile: &BoxProfile, caption: &Caption<'_>) -> Result<String, RenderError> {
    let winds: Vec<(f64, Vector)> = profile
        .levels
        .iter()
        .filter_map(|l| l.geostrophic_wind.map(|w| (l.pressure_pa, w)))
        .filter(|(_, w)| w.u.is_finite() && w.v.is_finite())
        .collect();
    let observed: Vec<(f64, Vector)> = profile
        .levels
        .iter()
        .filter_map(|l| l.wind.map(|w| (l.pressure_pa, w)))
        .filter(|(_, w)| w.u.is_finite() && w.v.is_finite())
        .collect();
    let frame = view(winds.iter().chain(&observed).map(|(_, w)| *w));
    let boxed = box_numbers(&profile.bbox);
    let mut sheet = Sheet::new(
        (WIDTH, HEIGHT),
        &format!("Hodograph: {}, {}, box {boxed}", caption.dataset, caption.time),
    );
    sheet.root_attr("class", "hodograph");
    sheet.root_attr("data-bbox", boxed.clone());
    sheet.group(&[("class", "background".into())], |a| a.fill(&palette::PAPER))?;
    header(&mut sheet, profile, caption)?;

    let ring_step = ring_step(&frame);
    let bearings: Vec<f64> = winds
        .iter()
        .chain(&observed)
        .filter(|(_, w)| w.speed() > 0.5 * ring_step)
        .map(|(_, w)| w.v.atan2(w.u))
        .collect();
    rings(&mut sheet, &frame, ring_step, &bearings)?;
    axes(&mut sheet, &frame)?;

    for layer in &profile.layers {
        let (b, t) = (&profile.levels[layer.layer.bottom], &profile.levels[layer.layer.top]);
        let (Some(wb), Some(wt)) = (b.geostrophic_wind, t.geostrophic_wind) else { continue };
        let class = Advection::of(layer);
        let mut attrs = vec![
            ("class", "layer-segment".to_string()),
            ("data-advection", class.as_str().to_string()),
            ("data-bottom-hpa", hpa(layer.bottom_pa)),
            ("data-top-hpa", hpa(layer.top_pa)),
        ];
        if let Some(vt) = layer.thermal_wind {
            attrs.push(("data-thermal-wind-ms", num(vt.speed(), 2)));
        }
        if let Some(a) = layer.thermal_advection {
            attrs.push(("data-advection-k-per-day", num(a * 86_400.0, 3)));
        }
        if class == Advection::Unknown {
            attrs.push(("stroke-dasharray", "6 4".to_string()));
        }
        let spec = frame.spec();
        sheet.element("line", &attrs, |a| {
            let a = a.apply_coord_spec(spec);
            a.draw(&Segment::new((wb.u, wb.v), (wt.u, wt.v), class.colour().stroke_width(3)))
        })?;
    }

    observed_marks(&mut sheet, &frame, &observed)?;

    let pixels: Vec<(f64, f64)> = winds.iter().map(|(_, w)| frame.to_px(w.u, w.v)).collect();
    for (k, (p, w)) in winds.iter().enumerate() {
        let pressure = hpa(*p);
        let spec = frame.spec();
        let at = (w.u, w.v);
        sheet.element(
            "circle",
            &[("class", "level".into()), ("data-pressure-hpa", pressure.clone())],
            |a| a.apply_coord_spec(spec).draw(&Circle::new(at, 5, palette::LEVEL.filled())),
        )?;
        let (pos, h) = label_place(&pixels, k);
        let style = anchored(font(12.0, palette::INK), h, VPos::Center);
        sheet.element(
            "text",
            &[("class", "level-label".into()), ("data-pressure-hpa", pressure.clone())],
            |a| a.draw(&Text::new(pressure.clone(), px(pos), style)),
        )?;
    }
    if winds.is_empty() {
        let (l, t, r, b) = PLOT;
        let style = anchored(font(14.0, palette::INK), HPos::Center, VPos::Center);
        let lines = [
            "No level has a box-mean geostrophic wind in this box:",
            "it lies in the equatorial band, below ground, or where data are missing.",
        ];
        sheet.element("text", &[("class", "note".into())], |a| {
            for (k, line) in lines.iter().enumerate() {
                a.draw(&Text::new(*line, ((l + r) / 2, (t + b) / 2 + 20 * k as i32), &style))?;
            }
            Ok(())
        })?;
    }

    legend(&mut sheet, profile, ring_step, !observed.is_empty())?;
    let style = anchored(font(11.0, palette::INK), HPos::Left, VPos::Bottom);
    let caution = caption.caution.to_string();
    sheet.element("text", &[("class", "caution".into())], |a| {
        a.draw(&Text::new(caution, (16, HEIGHT as i32 - 14), style))
    })?;
    Ok(sheet.finish())
}

/// A square view holding every wind and the origin, with a margin.
fn view(points: impl Iterator<Item = Vector>) -> Frame {
    let (mut u0, mut u1, mut v0, mut v1) = (0.0_f64, 0.0_f64, 0.0_f64, 0.0_f64);
    for w in points {
        u0 = u0.min(w.u);
        u1 = u1.max(w.u);
        v0 = v0.min(w.v);
        v1 = v1.max(w.v);
    }
    let span = (u1 - u0).max(v1 - v0).max(10.0);
    let half = 0.5 * span * 1.15 + 1.0;
    let (cu, cv) = (0.5 * (u0 + u1), 0.5 * (v0 + v1));
    Frame { px: PLOT, x: (cu - half, cu + half), y: (cv - half, cv + half) }
}

/// The farthest a corner of the view lies from the origin, m s⁻¹.
fn farthest(frame: &Frame) -> f64 {
    [frame.x.0, frame.x.1]
        .iter()
        .flat_map(|&u| [frame.y.0, frame.y.1].map(|v| f64::hypot(u, v)))
        .fold(0.0, f64::max)
}

fn ring_step(frame: &Frame) -> f64 {
    let reach = farthest(frame);
    RING_STEPS.iter().copied().find(|s| reach / s <= 8.0).unwrap_or(reach / 8.0)
}

/// Where the label of point `k` of the trace `pixels` goes: 11 px off the trace, square to
/// its direction there, on alternate sides for consecutive levels so that close points do
/// not stack their labels; and its horizontal anchor.
fn label_place(pixels: &[(f64, f64)], k: usize) -> ((f64, f64), HPos) {
    let p = pixels[k];
    let before = pixels[k.saturating_sub(1)];
    let after = pixels[(k + 1).min(pixels.len() - 1)];
    let (tx, ty) = (after.0 - before.0, after.1 - before.1);
    let norm = tx.hypot(ty);
    let side = if k % 2 == 0 { 1.0 } else { -1.0 };
    let (nx, ny) = if norm > 1e-9 { (-ty / norm * side, tx / norm * side) } else { (0.71, -0.71) };
    let h = if nx >= 0.0 { HPos::Left } else { HPos::Right };
    ((p.0 + 11.0 * nx, p.1 + 11.0 * ny), h)
}

fn header(
    sheet: &mut Sheet,
    profile: &BoxProfile,
    caption: &Caption<'_>,
) -> Result<(), RenderError> {
    let title = format!("Hodograph of the box-mean geostrophic wind — {}", caption.dataset);
    let time = if caption.time.is_empty() { "(no time coordinate)" } else { caption.time };
    let sub = format!(
        "{time} · box {} ({} grid cells) · segments: thermal wind of each layer",
        box_label(&profile.bbox),
        profile.n_cells
    );
    sheet.heading(title, sub)
}

fn rings(sheet: &mut Sheet, frame: &Frame, step: f64, bearings: &[f64]) -> Result<(), RenderError> {
    let (l, t, r, b) = frame.px;
    sheet.raw(&format!(
        "<defs><clipPath id=\"hodograph-clip\"><rect x=\"{l}\" y=\"{t}\" width=\"{}\" \
         height=\"{}\"/></clipPath></defs>\n",
        r - l,
        b - t
    ));
    sheet.group(&[("class", "frame".into())], |a| {
        a.draw(&Rectangle::new([(l, t), (r, b)], palette::QUIET.stroke_width(1)))
    })?;
    let px_per_ms = f64::from(r - l) / (frame.x.1 - frame.x.0);
    let inset = Frame { px: (l + 12, t + 12, r - 30, b - 12), ..frame.clone() };
    let bearings = label_bearings(frame, &inset, step, bearings);
    let origin = px(frame.to_px(0.0, 0.0));
    let reach = farthest(frame);
    let mut k = 1;
    while f64::from(k) * step <= reach {
        let speed = f64::from(k) * step;
        k += 1;
        let spot = bearings
            .iter()
            .map(|d| frame.to_px(speed * d.0, speed * d.1))
            .find(|&p| inset.holds_px(p));
        let Some(at) = spot else { continue };
        let radius = (speed * px_per_ms).round() as u32;
        let label = format!("{} m s⁻¹", num(speed, 1));
        let value = num(speed, 2);
        sheet.raw("<g clip-path=\"url(#hodograph-clip)\">\n");
        sheet.element(
            "circle",
            &[("class", "speed-ring".into()), ("data-speed-ms", value.clone())],
            |a| a.draw(&Circle::new(origin, radius, palette::FAINT.stroke_width(1))),
        )?;
        sheet.raw("</g>\n");
        let style = anchored(font(11.0, palette::QUIET), HPos::Left, VPos::Center);
        sheet.element(
            "text",
            &[("class", "ring-label".into()), ("data-speed-ms", value)],
            |a| a.draw(&Text::new(label, (px(at).0 + 3, px(at).1), style)),
        )?;
    }
    Ok(())
}

/// The directions (unit vectors in u, v) along which ring labels go, best first: of 24
/// bearings, among those that label at least 60 % of the most rings any bearing labels
/// inside `inset`, the one farthest in angle from every plotted wind (`bearings`, radians),
/// so that labels stay off the trace; then every other bearing, farthest from the winds
/// first, for the rings whose label falls outside the view along the first.
fn label_bearings(frame: &Frame, inset: &Frame, step: f64, bearings: &[f64]) -> Vec<(f64, f64)> {
    let reach = farthest(frame);
    let mut candidates: Vec<(usize, f64, (f64, f64))> = (0..24)
        .map(|k| {
            let angle = f64::from(k) * std::f64::consts::PI / 12.0;
            let dir = (angle.cos(), angle.sin());
            let mut inside = 0;
            let mut speed = step;
            while speed <= reach {
                if inset.holds_px(frame.to_px(speed * dir.0, speed * dir.1)) {
                    inside += 1;
                }
                speed += step;
            }
            let apart = bearings
                .iter()
                .map(|b| {
                    let d = (angle - b).rem_euclid(std::f64::consts::TAU);
                    d.min(std::f64::consts::TAU - d)
                })
                .fold(std::f64::consts::PI, f64::min);
            (inside, apart, dir)
        })
        .collect();
    let most = candidates.iter().map(|c| c.0).max().unwrap_or(0);
    let enough = (most * 3).div_ceil(5).max(1);
    candidates.sort_by(|a, b| b.1.total_cmp(&a.1).then(b.0.cmp(&a.0)));
    let first = candidates.iter().position(|c| c.0 >= enough).unwrap_or(0);
    let best = candidates.remove(first);
    std::iter::once(best.2).chain(candidates.into_iter().map(|c| c.2)).collect()
}

fn axes(sheet: &mut Sheet, frame: &Frame) -> Result<(), RenderError> {
    let spec = frame.spec();
    let (x, y) = (frame.x, frame.y);
    sheet.group(&[("class", "axes".into())], |a| {
        let a = a.apply_coord_spec(spec);
        let style = palette::QUIET.stroke_width(1);
        if x.0 <= 0.0 && x.1 >= 0.0 {
            a.draw(&Segment::new((0.0, y.0), (0.0, y.1), style))?;
        }
        if y.0 <= 0.0 && y.1 >= 0.0 {
            a.draw(&Segment::new((x.0, 0.0), (x.1, 0.0), style))?;
        }
        Ok(())
    })?;
    let (l, t, r, b) = frame.px;
    let style = anchored(font(12.0, palette::INK), HPos::Right, VPos::Top);
    sheet.element("text", &[("class", "axis-label".into())], |a| {
        a.draw(&Text::new("u (eastward), m s⁻¹ →", (r, b + 8), style.clone()))?;
        let up = anchored(font(12.0, palette::INK), HPos::Left, VPos::Bottom);
        a.draw(&Text::new("↑ v (northward), m s⁻¹", (l, t - 6), up))
    })
}

fn observed_marks(
    sheet: &mut Sheet,
    frame: &Frame,
    observed: &[(f64, Vector)],
) -> Result<(), RenderError> {
    if observed.len() >= 2 {
        let spec = frame.spec();
        let path: Vec<(f64, f64)> = observed.iter().map(|(_, w)| (w.u, w.v)).collect();
        sheet.element(
            "polyline",
            &[("class", "observed-trace".into()), ("stroke-dasharray", "4 3".into())],
            |a| {
                let a = a.apply_coord_spec(spec);
                a.draw(&PathElement::new(path, palette::OBSERVED.stroke_width(1)))
            },
        )?;
    }
    for (p, w) in observed {
        let (x, y) = px(frame.to_px(w.u, w.v));
        sheet.group(&[("class", "observed".into()), ("data-pressure-hpa", hpa(*p))], |a| {
            a.draw(&Rectangle::new(
                [(x - 4, y - 4), (x + 4, y + 4)],
                palette::OBSERVED.stroke_width(2),
            ))
        })?;
    }
    Ok(())
}

fn legend(
    sheet: &mut Sheet,
    profile: &BoxProfile,
    ring_step: f64,
    any_observed: bool,
) -> Result<(), RenderError> {
    let x = LEGEND_X;
    let rows = [
        (Advection::Warm, "warm advection (A ≥ 0.1 K/day)"),
        (Advection::Cold, "cold advection (A ≤ −0.1 K/day)"),
        (Advection::Neutral, "neutral (|A| < 0.1 K/day)"),
        (Advection::Unknown, "advection unknown"),
    ];
    let text = anchored(font(12.0, palette::INK), HPos::Left, VPos::Center);
    let notes = [
        format!("Rings every {} m s⁻¹", num(ring_step, 1)),
        "Segment: a layer's thermal wind,".to_string(),
        "bottom level to top level".to_string(),
        "A: box-mean thermal advection".to_string(),
        format!("{} levels, {} layers", profile.levels.len(), profile.layers.len()),
    ];
    sheet.group(&[("class", "legend".into())], |a| {
        a.draw(&Text::new("Layers", (x, PLOT.1 + 6), text.clone()))?;
        for (k, (class, label)) in rows.iter().enumerate() {
            let y = PLOT.1 + 30 + 24 * k as i32;
            a.draw(&Segment::new((x, y), (x + 26, y), class.colour().stroke_width(3)))?;
            a.draw(&Text::new(*label, (x + 34, y), text.clone()))?;
        }
        let y = PLOT.1 + 30 + 24 * 4 + 6;
        a.draw(&Circle::new((x + 13, y), 5, palette::LEVEL.filled()))?;
        a.draw(&Text::new("geostrophic wind (hPa)", (x + 34, y), text.clone()))?;
        let mut y = y + 24;
        if any_observed {
            a.draw(&Rectangle::new(
                [(x + 9, y - 4), (x + 17, y + 4)],
                palette::OBSERVED.stroke_width(2),
            ))?;
            a.draw(&Text::new("observed wind", (x + 34, y), text.clone()))?;
            y += 24;
        }
        let quiet = anchored(font(11.0, palette::QUIET), HPos::Left, VPos::Center);
        for (k, note) in notes.iter().enumerate() {
            a.draw(&Text::new(note.clone(), (x, y + 12 + 18 * k as i32), quiet.clone()))?;
        }
        Ok(())
    })
}
