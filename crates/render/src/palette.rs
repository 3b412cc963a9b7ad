//! The pictures' colours: one palette of our own, chosen to stay apart when printed in grey
//! (the gradient shades run light to dark) and for the common red–green colour deficiencies
//! (warm and cold differ in lightness as well as hue).

use plotters::style::RGBColor;

/// Ink for text, frames and contours.
pub const INK: RGBColor = RGBColor(0x2b, 0x2d, 0x42);
/// Quiet ink for graticules, rings and notes.
pub const QUIET: RGBColor = RGBColor(0x8d, 0x92, 0x9e);
/// Very light lines (speed rings, axes).
pub const FAINT: RGBColor = RGBColor(0xc9, 0xcc, 0xd3);
/// The paper.
pub const PAPER: RGBColor = RGBColor(0xff, 0xff, 0xff);

/// A layer with warm advection.
pub const WARM: RGBColor = RGBColor(0xc4, 0x4d, 0x2a);
/// A layer with cold advection.
pub const COLD: RGBColor = RGBColor(0x1f, 0x5f, 0x9e);
/// A layer with advection near zero.
pub const NEUTRAL: RGBColor = RGBColor(0x6f, 0x6a, 0x5c);
/// A layer whose advection is unknown.
pub const UNKNOWN: RGBColor = RGBColor(0xb4, 0xb1, 0xa8);
/// The box-mean geostrophic wind points.
pub const LEVEL: RGBColor = RGBColor(0x2b, 0x2d, 0x42);
/// Observed-wind marks.
pub const OBSERVED: RGBColor = RGBColor(0x3d, 0x8b, 0x5a);

/// Thickness contours.
pub const CONTOUR: RGBColor = RGBColor(0x3a, 0x2e, 0x5c);
/// Thermal-wind arrows.
pub const ARROW: RGBColor = RGBColor(0x12, 0x12, 0x12);

/// Shades of the temperature-gradient bins, weakest first (sand to deep plum).
pub const GRADIENT: [RGBColor; 8] = [
    RGBColor(0xf6, 0xf1, 0xe4),
    RGBColor(0xf0, 0xdc, 0xb4),
    RGBColor(0xea, 0xc0, 0x8a),
    RGBColor(0xe0, 0x9a, 0x6e),
    RGBColor(0xcf, 0x72, 0x62),
    RGBColor(0xb1, 0x4f, 0x68),
    RGBColor(0x86, 0x35, 0x6c),
    RGBColor(0x57, 0x22, 0x5e),
];
