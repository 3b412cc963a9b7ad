//! Composing a picture from plotters fragments, with the classes and attributes of the DOM
//! contract.
//!
//! plotters draws shapes and writes their SVG, but gives an element no class, id or data
//! attribute. A [`Sheet`] therefore draws each part of a picture on a fresh SVG backend of
//! the picture's size, keeps only the elements it wrote (the backend's own `<svg>` wrapper is
//! dropped), and either wraps them in a `<g>` with the part's attributes ([`Sheet::group`]) or
//! writes the attributes into the drawn elements themselves ([`Sheet::element`]). Every
//! fragment is well-formed on its own (plotters escapes its text and attributes; ours are
//! escaped by [`escape`]), so the whole is too.

use std::fmt::Write as _;

use plotters::coord::Shift;
use plotters::coord::types::RangedCoordf64;
use plotters::element::{Drawable, PointCollection};
use plotters::prelude::*;
use plotters_backend::{BackendCoord, DrawingErrorKind};

use crate::RenderError;

/// The drawing area of a fragment, in SVG user units (pixels).
pub(crate) type Area<'a> = DrawingArea<SVGBackend<'a>, Shift>;

/// A plotters drawing error, as returned by the drawing closures.
pub(crate) type DrawResult = Result<(), DrawingAreaErrorKind<std::io::Error>>;

/// The data coordinates of a frame: `x` and `y` ranges mapped linearly onto a pixel
/// rectangle, `y` increasing upward.
#[derive(Debug, Clone)]
pub(crate) struct Frame {
    /// Left, top, right, bottom in pixels.
    pub px: (i32, i32, i32, i32),
    /// Data range of x, left to right.
    pub x: (f64, f64),
    /// Data range of y, bottom to top.
    pub y: (f64, f64),
}

impl Frame {
    /// The plotters coordinate system of the frame.
    pub fn spec(&self) -> Cartesian2d<RangedCoordf64, RangedCoordf64> {
        let (l, t, r, b) = self.px;
        Cartesian2d::new(self.x.0..self.x.1, self.y.0..self.y.1, (l..r, b..t))
    }

    /// The pixel of a data point (exact, not rounded).
    pub fn to_px(&self, x: f64, y: f64) -> (f64, f64) {
        let (l, t, r, b) = self.px;
        let fx = (x - self.x.0) / (self.x.1 - self.x.0);
        let fy = (y - self.y.0) / (self.y.1 - self.y.0);
        (f64::from(l) + fx * f64::from(r - l), f64::from(b) - fy * f64::from(b - t))
    }

    /// Whether a pixel lies inside the frame, edges included.
    pub fn holds_px(&self, (x, y): (f64, f64)) -> bool {
        let (l, t, r, b) = self.px;
        x >= f64::from(l) && x <= f64::from(r) && y >= f64::from(t) && y <= f64::from(b)
    }

    /// Width and height in pixels.
    pub fn size_px(&self) -> (i32, i32) {
        (self.px.2 - self.px.0, self.px.3 - self.px.1)
    }
}

/// A picture being put together.
pub(crate) struct Sheet {
    size: (u32, u32),
    root_attrs: Vec<(&'static str, String)>,
    title: String,
    body: String,
}

impl Sheet {
    /// An empty picture of `size` pixels whose `<title>` is `title`.
    pub fn new(size: (u32, u32), title: &str) -> Self {
        Self { size, root_attrs: Vec::new(), title: title.to_string(), body: String::new() }
    }

    /// Adds an attribute to the root `<svg>`.
    pub fn root_attr(&mut self, key: &'static str, value: impl Into<String>) {
        self.root_attrs.push((key, value.into()));
    }

    /// Draws one fragment and returns its elements without the backend's wrapper.
    fn fragment(&self, draw: impl FnOnce(&Area<'_>) -> DrawResult) -> Result<String, RenderError> {
        let mut buf = String::with_capacity(512);
        {
            let root = SVGBackend::with_string(&mut buf, self.size).into_drawing_area();
            draw(&root).map_err(drawing)?;
            root.present().map_err(drawing)?;
        }
        let inner = buf
            .split_once('\n')
            .map(|(_, rest)| rest)
            .and_then(|rest| rest.strip_suffix("</svg>\n"))
            .ok_or_else(|| RenderError::Drawing("unexpected SVG backend output".into()))?;
        Ok(inner.to_string())
    }

    /// Draws a fragment inside `<g attrs…>…</g>`.
    pub fn group(
        &mut self,
        attrs: &[(&str, String)],
        draw: impl FnOnce(&Area<'_>) -> DrawResult,
    ) -> Result<(), RenderError> {
        let inner = self.fragment(draw)?;
        self.body.push_str("<g");
        push_attrs(&mut self.body, attrs);
        self.body.push_str(">\n");
        self.body.push_str(&inner);
        self.body.push_str("</g>\n");
        Ok(())
    }

    /// Draws a fragment and writes `attrs` into every `<tag …>` element it holds.
    pub fn element(
        &mut self,
        tag: &str,
        attrs: &[(&str, String)],
        draw: impl FnOnce(&Area<'_>) -> DrawResult,
    ) -> Result<(), RenderError> {
        let inner = self.fragment(draw)?;
        let opening = format!("<{tag} ");
        for line in inner.split_inclusive('\n') {
            match line.strip_prefix(&opening) {
                Some(rest) => {
                    self.body.push('<');
                    self.body.push_str(tag);
                    push_attrs(&mut self.body, attrs);
                    self.body.push(' ');
                    self.body.push_str(rest);
                }
                None => self.body.push_str(line),
            }
        }
        Ok(())
    }

    /// The picture's title and the line under it, at the top left (`text.title`,
    /// `text.subtitle`).
    pub fn heading(&mut self, title: String, subtitle: String) -> Result<(), RenderError> {
        let big = anchored(font(18.0, crate::palette::INK), HPos::Left, VPos::Top);
        let small = anchored(font(13.0, crate::palette::INK), HPos::Left, VPos::Top);
        self.element("text", &[("class", "title".into())], |a| {
            a.draw(&Text::new(title, (16, 14), big))
        })?;
        self.element("text", &[("class", "subtitle".into())], |a| {
            a.draw(&Text::new(subtitle, (16, 44), small))
        })
    }

    /// Adds markup written by this crate (definitions, group boundaries).
    pub fn raw(&mut self, markup: &str) {
        self.body.push_str(markup);
    }

    /// The finished SVG document.
    pub fn finish(self) -> String {
        let (w, h) = self.size;
        let mut out = String::with_capacity(self.body.len() + 512);
        out.push_str("<?xml version=\"1.0\" encoding=\"UTF-8\"?>\n<svg");
        let mut attrs = vec![
            ("xmlns", "http://www.w3.org/2000/svg".to_string()),
            ("width", w.to_string()),
            ("height", h.to_string()),
            ("viewBox", format!("0 0 {w} {h}")),
        ];
        attrs.extend(self.root_attrs.iter().map(|(k, v)| (*k, v.clone())));
        push_attrs(&mut out, &attrs);
        out.push_str(">\n<title>");
        out.push_str(&escape(&self.title));
        out.push_str("</title>\n");
        out.push_str(&self.body);
        out.push_str("</svg>\n");
        out
    }
}

fn drawing(e: DrawingAreaErrorKind<std::io::Error>) -> RenderError {
    RenderError::Drawing(e.to_string())
}

fn push_attrs(out: &mut String, attrs: &[(&str, String)]) {
    for (k, v) in attrs {
        let _ = write!(out, " {k}=\"{}\"", escape(v));
    }
}

/// `text` with the five XML special characters escaped (XML 1.0 §2.4, §3.1).
pub(crate) fn escape(text: &str) -> String {
    let mut out = String::with_capacity(text.len());
    for c in text.chars() {
        match c {
            '<' => out.push_str("&lt;"),
            '>' => out.push_str("&gt;"),
            '&' => out.push_str("&amp;"),
            '"' => out.push_str("&quot;"),
            '\'' => out.push_str("&apos;"),
            other => out.push(other),
        }
    }
    out
}

/// A number for an attribute: at most `decimals` decimals, trailing zeros dropped, no `-0`.
pub(crate) fn num(x: f64, decimals: usize) -> String {
    let text = format!("{x:.decimals$}");
    let text =
        if text.contains('.') { text.trim_end_matches('0').trim_end_matches('.') } else { &text };
    if text == "-0" { "0".to_string() } else { text.to_string() }
}

/// A straight line between two points, drawn as an SVG `<line>` (plotters' own path element
/// becomes a `<polyline>`).
pub(crate) struct Segment<C> {
    points: [C; 2],
    style: ShapeStyle,
}

impl<C> Segment<C> {
    /// The line from `a` to `b`.
    pub fn new(a: C, b: C, style: impl Into<ShapeStyle>) -> Self {
        Self { points: [a, b], style: style.into() }
    }
}

impl<'a, C> PointCollection<'a, C> for &'a Segment<C> {
    type Point = &'a C;
    type IntoIter = &'a [C];
    fn point_iter(self) -> &'a [C] {
        &self.points
    }
}

impl<C, DB: DrawingBackend> Drawable<DB> for Segment<C> {
    fn draw<I: Iterator<Item = BackendCoord>>(
        &self,
        mut points: I,
        backend: &mut DB,
        _: (u32, u32),
    ) -> Result<(), DrawingErrorKind<DB::ErrorType>> {
        match (points.next(), points.next()) {
            (Some(a), Some(b)) => backend.draw_line(a, b, &self.style),
            _ => Ok(()),
        }
    }
}

/// A text style of the pictures' one sans-serif family.
pub(crate) fn font(size: f64, colour: RGBColor) -> TextStyle<'static> {
    ("sans-serif", size).into_font().color(&colour)
}

/// A text style anchored at `h`, `v`.
pub(crate) fn anchored(style: TextStyle<'static>, h: HPos, v: VPos) -> TextStyle<'static> {
    style.pos(Pos::new(h, v))
}

pub(crate) use plotters::style::text_anchor::{HPos, Pos, VPos};

/// The rounded pixel of an exact one.
pub(crate) fn px((x, y): (f64, f64)) -> (i32, i32) {
    (x.round() as i32, y.round() as i32)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn numbers_are_short_and_never_negative_zero() {
        assert_eq!(num(5460.0, 2), "5460");
        assert_eq!(num(12.345, 2), "12.35");
        assert_eq!(num(-0.0001, 2), "0");
        assert_eq!(num(-12.5, 1), "-12.5");
    }

    #[test]
    fn elements_get_their_attributes_and_groups_wrap() {
        let mut sheet = Sheet::new((100, 50), "a <title> & more");
        sheet.root_attr("data-bbox", "1,2,3,4");
        sheet
            .element("circle", &[("class", "level".into()), ("data-x", "\"q\"".into())], |a| {
                a.draw(&Circle::new((10, 10), 3, BLACK.filled()))
            })
            .unwrap();
        sheet
            .group(&[("class", "arrow".into())], |a| {
                a.draw(&Segment::new((0, 0), (5, 5), BLACK.stroke_width(1)))
            })
            .unwrap();
        let text = sheet.finish();
        let doc = roxmltree::Document::parse(&text).expect("well-formed XML (XML 1.0)");
        let root = doc.root_element();
        assert_eq!(root.attribute("viewBox"), Some("0 0 100 50"));
        assert_eq!(root.attribute("data-bbox"), Some("1,2,3,4"));
        let title = root.children().find(|n| n.has_tag_name("title")).unwrap();
        assert_eq!(title.text(), Some("a <title> & more"));
        let circle = root.descendants().find(|n| n.has_tag_name("circle")).unwrap();
        assert_eq!(circle.attribute("class"), Some("level"));
        assert_eq!(circle.attribute("data-x"), Some("\"q\""));
        assert_eq!(circle.attribute("cx"), Some("10"));
        let g = root.descendants().find(|n| n.has_tag_name("g")).unwrap();
        assert_eq!(g.attribute("class"), Some("arrow"));
        let line = g.children().find(|n| n.has_tag_name("line")).unwrap();
        assert_eq!((line.attribute("x1"), line.attribute("y2")), (Some("0"), Some("5")));
    }

    #[test]
    fn frames_map_y_upward() {
        let f = Frame { px: (10, 20, 110, 70), x: (0.0, 10.0), y: (0.0, 5.0) };
        assert_eq!(f.to_px(0.0, 0.0), (10.0, 70.0));
        assert_eq!(f.to_px(10.0, 5.0), (110.0, 20.0));
        let mut buf = String::new();
        let root = SVGBackend::with_string(&mut buf, (200, 100)).into_drawing_area();
        let area = root.apply_coord_spec(f.spec());
        assert_eq!(area.map_coordinate(&(0.0, 0.0)), (10, 70));
        assert_eq!(area.map_coordinate(&(5.0, 2.5)), (60, 45));
    }
}
