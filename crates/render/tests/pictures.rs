//! The pictures' DOM contract on synthetic inputs: each SVG is parsed as XML (roxmltree, an
//! XML 1.0 parser) and its elements are counted and placed against what the inputs imply,
//! computed here independently of the drawing code.

use ndarray::Array2;
use roxmltree::{Document, Node};
use shearbox_core::{
    BBox, BoxProfile, Config, FieldsBuilder, Grid, Layer, LayerMeans, LevelMeans, Levels,
    MaskCounts, MeanTemperatureKind, ThicknessMethod, Vector, box_profile, compute,
};
use shearbox_render::{
    Caption, LayerField, MAX_ARROWS, MapOptions, RenderError, default_stride, hodograph_svg,
    map_svg,
};

const CAUTION: &str = "A test caution: not an official forecast or warning.";

fn caption() -> Caption<'static> {
    Caption { dataset: "synthetic", time: "2026-01-15T00:00:00Z", caution: CAUTION }
}

fn parse(svg: &str) -> Document<'_> {
    Document::parse(svg).unwrap_or_else(|e| panic!("not well-formed XML (XML 1.0): {e}"))
}

fn with_class<'a, 'i>(doc: &'a Document<'i>, tag: &str, class: &str) -> Vec<Node<'a, 'i>> {
    doc.descendants()
        .filter(|n| n.has_tag_name(tag) && n.attribute("class") == Some(class))
        .collect()
}

fn attr(n: &Node<'_, '_>, name: &str) -> f64 {
    n.attribute(name)
        .unwrap_or_else(|| panic!("{name} missing on {n:?}"))
        .parse()
        .unwrap_or_else(|e| panic!("{name} on {n:?}: {e}"))
}

fn text(n: &Node<'_, '_>) -> String {
    n.text().unwrap_or("").trim().to_string()
}

/// The contract every picture keeps: root size and view box, a title, the caution.
fn check_frame(doc: &Document<'_>) {
    let root = doc.root_element();
    assert!(root.has_tag_name("svg"));
    let (w, h) = (attr(&root, "width"), attr(&root, "height"));
    assert_eq!(root.attribute("viewBox"), Some(format!("0 0 {w} {h}").as_str()));
    assert!(root.children().any(|n| n.has_tag_name("title") && !text(&n).is_empty()));
    let cautions = with_class(doc, "text", "caution");
    assert_eq!(cautions.len(), 1);
    assert_eq!(text(&cautions[0]), CAUTION);
}

fn level(pa: f64, wind: Option<(f64, f64)>, observed: Option<(f64, f64)>) -> LevelMeans {
    LevelMeans {
        pressure_pa: pa,
        geopotential_height: None,
        temperature: None,
        geostrophic_wind: wind.map(|(u, v)| Vector { u, v }),
        wind: observed.map(|(u, v)| Vector { u, v }),
        valid_cells: usize::from(wind.is_some()),
    }
}

fn layer(levels: &[LevelMeans], bottom: usize, advection_k_per_day: Option<f64>) -> LayerMeans {
    let thermal_wind = match (levels[bottom].geostrophic_wind, levels[bottom + 1].geostrophic_wind)
    {
        (Some(b), Some(t)) => Some(Vector { u: t.u - b.u, v: t.v - b.v }),
        _ => None,
    };
    LayerMeans {
        layer: Layer { bottom, top: bottom + 1 },
        bottom_pa: levels[bottom].pressure_pa,
        top_pa: levels[bottom + 1].pressure_pa,
        thickness_method: ThicknessMethod::Geopotential,
        mean_temperature_kind: MeanTemperatureKind::Dry,
        thickness: None,
        thickness_from_temperature: None,
        mean_temperature: None,
        thermal_wind,
        temperature_gradient: None,
        baroclinic_torque: None,
        rotational_torque: None,
        balance_ratio: None,
        thermal_advection: advection_k_per_day.map(|a| a / 86_400.0),
        turning: None,
        n_squared: None,
        eady_growth_rate: None,
        observed_shear: None,
        ageostrophic_shear: None,
        counts: MaskCounts::default(),
    }
}

/// Six levels, the lowest below ground (no geostrophic wind), observed wind on three; five
/// layers: one without a segment (its bottom has no wind), then warm, cold, neutral, unknown.
fn profile() -> BoxProfile {
    let levels = vec![
        level(100_000.0, None, None),
        level(92_500.0, Some((2.0, 3.0)), Some((1.0, 2.0))),
        level(85_000.0, Some((6.0, 4.0)), Some((5.0, 3.5))),
        level(70_000.0, Some((12.0, 2.0)), None),
        level(50_000.0, Some((18.0, -1.0)), Some((17.0, -2.0))),
        level(30_000.0, Some((30.0, -4.0)), None),
    ];
    let layers = vec![
        layer(&levels, 0, Some(3.0)),
        layer(&levels, 1, Some(1.5)),
        layer(&levels, 2, Some(-2.0)),
        layer(&levels, 3, Some(0.04)),
        layer(&levels, 4, None),
    ];
    BoxProfile { bbox: BBox::new(-30.0, 42.0, -10.0, 56.0).unwrap(), n_cells: 1189, levels, layers }
}

#[test]
fn hodograph_has_one_point_per_level_and_one_segment_per_layer() {
    let p = profile();
    let svg = hodograph_svg(&p, &caption()).unwrap();
    let doc = parse(&svg);
    check_frame(&doc);

    let points = with_class(&doc, "circle", "level");
    let with_wind: Vec<&LevelMeans> =
        p.levels.iter().filter(|l| l.geostrophic_wind.is_some()).collect();
    assert_eq!(points.len(), with_wind.len());
    let pressures: Vec<f64> = points.iter().map(|n| attr(n, "data-pressure-hpa")).collect();
    let want: Vec<f64> = with_wind.iter().map(|l| l.pressure_pa / 100.0).collect();
    assert_eq!(pressures, want);
    let labels = with_class(&doc, "text", "level-label");
    assert_eq!(labels.len(), points.len());
    for (label, pressure) in labels.iter().zip(&pressures) {
        assert_eq!(text(label).parse::<f64>().unwrap(), *pressure);
    }

    // A layer gets a segment when both its levels have a wind; its class is the sign of its
    // advection (neutral under 0.1 K per day, the documented threshold).
    let segments = with_class(&doc, "line", "layer-segment");
    let drawn: Vec<&LayerMeans> = p
        .layers
        .iter()
        .filter(|l| {
            p.levels[l.layer.bottom].geostrophic_wind.is_some()
                && p.levels[l.layer.top].geostrophic_wind.is_some()
        })
        .collect();
    assert_eq!(segments.len(), drawn.len());
    let classes: Vec<&str> =
        segments.iter().map(|s| s.attribute("data-advection").unwrap()).collect();
    assert_eq!(classes, ["warm", "cold", "neutral", "unknown"]);
    // Each segment runs from its bottom level's point to its top level's point.
    let centre = |hpa: f64| {
        let c = points.iter().find(|n| attr(n, "data-pressure-hpa") == hpa).unwrap();
        (attr(c, "cx"), attr(c, "cy"))
    };
    for (s, l) in segments.iter().zip(&drawn) {
        assert_eq!(attr(s, "data-bottom-hpa"), l.bottom_pa / 100.0);
        assert_eq!(attr(s, "data-top-hpa"), l.top_pa / 100.0);
        assert_eq!((attr(s, "x1"), attr(s, "y1")), centre(l.bottom_pa / 100.0));
        assert_eq!((attr(s, "x2"), attr(s, "y2")), centre(l.top_pa / 100.0));
    }
    // Warm and cold segments differ in colour.
    let stroke = |class: &str| {
        segments
            .iter()
            .find(|s| s.attribute("data-advection") == Some(class))
            .and_then(|s| s.attribute("stroke"))
    };
    assert_ne!(stroke("warm"), stroke("cold"));

    // u grows to the right and v upward: 30 hPa's point (u = 30) is right of 925's (u = 2);
    // 850 (v = 4) is above 500 (v = -1).
    assert!(centre(300.0).0 > centre(925.0).0);
    assert!(centre(850.0).1 < centre(500.0).1);

    let observed = doc
        .descendants()
        .filter(|n| n.attribute("class") == Some("observed"))
        .map(|n| attr(&n, "data-pressure-hpa"))
        .collect::<Vec<_>>();
    assert_eq!(observed, [925.0, 850.0, 500.0]);
    assert_eq!(with_class(&doc, "g", "legend").len(), 1);
}

#[test]
fn hodograph_rings_are_labelled_and_to_scale() {
    let svg = hodograph_svg(&profile(), &caption()).unwrap();
    let doc = parse(&svg);
    let rings = with_class(&doc, "circle", "speed-ring");
    let labels = with_class(&doc, "text", "ring-label");
    assert!(rings.len() >= 3, "{} rings", rings.len());
    assert_eq!(rings.len(), labels.len());
    let speeds: Vec<f64> = rings.iter().map(|r| attr(r, "data-speed-ms")).collect();
    let step = speeds[0];
    for (k, s) in speeds.iter().enumerate() {
        assert_eq!(*s, step * (k + 1) as f64, "rings at multiples of one step: {speeds:?}");
    }
    for (ring, label) in rings.iter().zip(&labels) {
        assert_eq!(ring.attribute("data-speed-ms"), label.attribute("data-speed-ms"));
        assert!(text(label).ends_with("m s⁻¹"), "{}", text(label));
    }
    // Radius proportional to speed (plotters rounds a radius to a whole pixel).
    let per_ms: Vec<f64> = rings.iter().map(|r| attr(r, "r") / attr(r, "data-speed-ms")).collect();
    let outer = rings.last().unwrap();
    for (ring, ratio) in rings.iter().zip(&per_ms) {
        let tolerance = 0.5 / attr(ring, "data-speed-ms");
        assert!((ratio - attr(outer, "r") / attr(outer, "data-speed-ms")).abs() <= 2.0 * tolerance);
    }
    // The rings are centred on the origin: the point of a level with u = v = 0 would sit
    // there, so check the centre against the axes' crossing.
    let axes = with_class(&doc, "g", "axes");
    let lines: Vec<Node<'_, '_>> =
        axes[0].descendants().filter(|n| n.has_tag_name("line")).collect();
    let vertical = lines.iter().find(|l| attr(l, "x1") == attr(l, "x2")).unwrap();
    let horizontal = lines.iter().find(|l| attr(l, "y1") == attr(l, "y2")).unwrap();
    assert_eq!(attr(&rings[0], "cx"), attr(vertical, "x1"));
    assert_eq!(attr(&rings[0], "cy"), attr(horizontal, "y1"));
}

#[test]
fn hodograph_without_winds_says_so() {
    let mut p = profile();
    for l in &mut p.levels {
        l.geostrophic_wind = None;
        l.wind = None;
    }
    let svg = hodograph_svg(&p, &caption()).unwrap();
    let doc = parse(&svg);
    check_frame(&doc);
    assert!(with_class(&doc, "circle", "level").is_empty());
    assert!(with_class(&doc, "line", "layer-segment").is_empty());
    let note = with_class(&doc, "text", "note");
    assert!(note.iter().any(|n| text(n).contains("No level has a box-mean geostrophic wind")));
}

/// A 1°-spaced field: thickness rising 12 m per row northward and 2 m per column eastward,
/// a thermal wind that varies with position, a gradient of (j + 0.5)/10 K per 100 km, and a masked
/// block of rows 10..14, columns 20..25 (NaN in every field).
struct Synthetic {
    lat: Vec<f64>,
    lon: Vec<f64>,
    thickness: Array2<f32>,
    u: Array2<f32>,
    v: Array2<f32>,
    gradient: Array2<f32>,
}

const MASK_ROWS: std::ops::Range<usize> = 10..14;
const MASK_COLS: std::ops::Range<usize> = 20..25;

fn masked(j: usize, i: usize) -> bool {
    MASK_ROWS.contains(&j) && MASK_COLS.contains(&i)
}

fn synthetic(lon0: f64, rows: usize, cols: usize) -> Synthetic {
    let lat: Vec<f64> = (0..rows).map(|j| 30.0 + j as f64).collect();
    let lon: Vec<f64> = (0..cols).map(|i| lon0 + i as f64).collect();
    let f = |value: f32| move |(j, i): (usize, usize)| if masked(j, i) { f32::NAN } else { value };
    let field = |g: &dyn Fn(usize, usize) -> f32| {
        Array2::from_shape_fn((rows, cols), |(j, i)| f(g(j, i))((j, i)))
    };
    Synthetic {
        thickness: field(&|j, i| 5300.0 + 12.0 * j as f32 + 2.0 * i as f32),
        u: field(&|j, _| 5.0 + j as f32),
        v: field(&|_, i| -3.0 + 0.5 * i as f32),
        gradient: field(&|j, _| (j as f32 + 0.5) / 10.0 * 1e-5),
        lat,
        lon,
    }
}

impl Synthetic {
    fn field(&self) -> LayerField<'_> {
        LayerField::new(
            &self.lat,
            &self.lon,
            self.thickness.view(),
            (self.u.view(), self.v.view()),
            self.gradient.view(),
            (1000.0, 500.0),
        )
        .unwrap()
    }
}

/// The plot area's mapping, read from the picture: (lon, lat) → pixel.
struct PlotArea {
    x: f64,
    y: f64,
    w: f64,
    h: f64,
    bbox: [f64; 4],
}

impl PlotArea {
    fn read(doc: &Document<'_>) -> Self {
        let rect = doc
            .descendants()
            .find(|n| n.attribute("id") == Some("plot-area"))
            .expect("a plot-area rectangle");
        assert!(rect.has_tag_name("rect"));
        assert_eq!(rect.attribute("fill"), Some("none"));
        let bbox: Vec<f64> = doc
            .root_element()
            .attribute("data-bbox")
            .expect("data-bbox")
            .split(',')
            .map(|v| v.parse().unwrap())
            .collect();
        Self {
            x: attr(&rect, "x"),
            y: attr(&rect, "y"),
            w: attr(&rect, "width"),
            h: attr(&rect, "height"),
            bbox: [bbox[0], bbox[1], bbox[2], bbox[3]],
        }
    }

    fn px(&self, lon: f64, lat: f64) -> (f64, f64) {
        let [w, s, e, n] = self.bbox;
        (self.x + (lon - w) / (e - w) * self.w, self.y + (n - lat) / (n - s) * self.h)
    }
}

fn points(n: &Node<'_, '_>) -> Vec<(f64, f64)> {
    n.attribute("points")
        .unwrap()
        .split_whitespace()
        .map(|p| {
            let (x, y) = p.split_once(',').unwrap();
            (x.parse().unwrap(), y.parse().unwrap())
        })
        .collect()
}

#[test]
fn map_has_one_arrow_per_decimated_defined_cell() {
    let data = synthetic(-20.0, 30, 40);
    let field = data.field();
    for stride in [None, Some(1), Some(3), Some(7)] {
        let options = MapOptions { stride, ..MapOptions::default() };
        let svg = map_svg(&field, &caption(), &options).unwrap();
        let doc = parse(&svg);
        check_frame(&doc);
        let s = stride.unwrap_or_else(|| default_stride(30, 40));
        // Counted from the input arrays, not from the renderer.
        let mut want = Vec::new();
        for j in (0..30).step_by(s) {
            for i in (0..40).step_by(s) {
                if data.u[[j, i]].is_finite() && data.v[[j, i]].is_finite() {
                    want.push((data.lat[j], data.lon[i]));
                }
            }
        }
        let arrows = with_class(&doc, "g", "arrow");
        assert_eq!(arrows.len(), want.len(), "stride {s}");
        let got: Vec<(f64, f64)> =
            arrows.iter().map(|a| (attr(a, "data-lat"), attr(a, "data-lon"))).collect();
        assert_eq!(got, want, "stride {s}");
        for a in &arrows {
            let (lat, lon) = (attr(a, "data-lat"), attr(a, "data-lon"));
            let (j, i) = ((lat - 30.0) as usize, (lon + 20.0) as usize);
            assert!(!masked(j, i), "an arrow on masked cell {j},{i}");
            let speed = f64::from(data.u[[j, i]]).hypot(f64::from(data.v[[j, i]]));
            assert!((attr(a, "data-speed") - speed).abs() < 0.006);
        }
        assert_eq!(with_class(&doc, "g", "reference-arrow").len(), 1);
        assert_eq!(doc.root_element().attribute("data-stride"), Some(s.to_string().as_str()));
    }
}

#[test]
fn map_arrows_sit_on_their_cells_and_point_downwind() {
    let data = synthetic(-20.0, 30, 40);
    let svg = map_svg(&data.field(), &caption(), &MapOptions::default()).unwrap();
    let doc = parse(&svg);
    let area = PlotArea::read(&doc);
    // Half a degree beyond the outer cell centres (1° spacing).
    assert_eq!(area.bbox, [-20.5, 29.5, 19.5, 59.5]);
    for a in with_class(&doc, "g", "arrow") {
        let (lat, lon) = (attr(&a, "data-lat"), attr(&a, "data-lon"));
        let shaft = a.descendants().find(|n| n.has_tag_name("line")).unwrap();
        let (x1, y1, x2, y2) =
            (attr(&shaft, "x1"), attr(&shaft, "y1"), attr(&shaft, "x2"), attr(&shaft, "y2"));
        let (cx, cy) = area.px(lon, lat);
        // Centred on the cell, to within the pixel rounding of both ends.
        assert!((0.5 * (x1 + x2) - cx).abs() <= 1.5 && (0.5 * (y1 + y2) - cy).abs() <= 1.5);
        let (j, i) = ((lat - 30.0) as usize, (lon + 20.0) as usize);
        let (u, v) = (f64::from(data.u[[j, i]]), f64::from(data.v[[j, i]]));
        // Tail to tip goes with the wind: east to the right, north up (y down).
        let dot = (x2 - x1) * u + (y1 - y2) * v;
        assert!(dot > 0.0, "arrow at {lat},{lon} points against ({u},{v})");
    }
}

#[test]
fn map_contours_are_labelled_in_multiples_of_the_interval_and_avoid_masked_cells() {
    let data = synthetic(-20.0, 30, 40);
    let svg = map_svg(&data.field(), &caption(), &MapOptions::default()).unwrap();
    let doc = parse(&svg);
    let area = PlotArea::read(&doc);
    let (lo, hi) = data
        .thickness
        .iter()
        .filter(|v| v.is_finite())
        .fold((f64::MAX, f64::MIN), |(a, b), &v| (a.min(f64::from(v)), b.max(f64::from(v))));
    let groups = with_class(&doc, "g", "contour");
    // Every multiple of 60 m inside the field's range has its line.
    let want: Vec<f64> =
        ((lo / 60.0).ceil() as i64..=(hi / 60.0).floor() as i64).map(|k| k as f64 * 60.0).collect();
    let values: Vec<f64> = groups.iter().map(|g| attr(g, "data-value")).collect();
    assert_eq!(values, want);
    let labels = with_class(&doc, "text", "contour-label");
    assert!(!labels.is_empty());
    for l in &labels {
        let value: f64 = text(l).parse().unwrap();
        assert_eq!(value % 60.0, 0.0, "label {value} is not a multiple of 60 m");
        assert!(value >= lo && value <= hi);
        assert_eq!(attr(l, "data-value"), value);
    }
    // No contour vertex lies inside the masked block, widened by the cells whose corners
    // it touches (half a cell plus one cell on each side, in degrees from its centres).
    let (w, e) = (data.lon[MASK_COLS.start] - 1.0, data.lon[MASK_COLS.end - 1] + 1.0);
    let (s, n) = (data.lat[MASK_ROWS.start] - 1.0, data.lat[MASK_ROWS.end - 1] + 1.0);
    let (x0, y1) = area.px(w, s);
    let (x1, y0) = area.px(e, n);
    for g in &groups {
        for line in g.descendants().filter(|n| n.has_tag_name("polyline")) {
            for (x, y) in points(&line) {
                let inside = x > x0 + 1.0 && x < x1 - 1.0 && y > y0 + 1.0 && y < y1 - 1.0;
                assert!(
                    !inside,
                    "contour {} passes ({x},{y}) in the masked block",
                    attr(g, "data-value")
                );
            }
        }
    }
    // A thickness rising northward: the contour's pixel rows order with its value.
    let mean_y = |g: &Node<'_, '_>| {
        let pts: Vec<(f64, f64)> = g
            .descendants()
            .filter(|n| n.has_tag_name("polyline"))
            .flat_map(|l| points(&l))
            .collect();
        pts.iter().map(|p| p.1).sum::<f64>() / pts.len() as f64
    };
    assert!(mean_y(&groups[0]) > mean_y(&groups[groups.len() - 1]));
}

#[test]
fn map_shades_every_defined_cell_once_and_masked_cells_never() {
    let data = synthetic(-20.0, 30, 40);
    let svg = map_svg(&data.field(), &caption(), &MapOptions::default()).unwrap();
    let doc = parse(&svg);
    let area = PlotArea::read(&doc);
    let shading = with_class(&doc, "g", "shading");
    assert_eq!(shading.len(), 1);
    let rects: Vec<(f64, f64, f64, f64, String)> = shading[0]
        .children()
        .filter(|n| n.has_tag_name("rect"))
        .map(|r| {
            (
                attr(&r, "x"),
                attr(&r, "y"),
                attr(&r, "width"),
                attr(&r, "height"),
                r.attribute("fill").unwrap().to_string(),
            )
        })
        .collect();
    let mut fills = std::collections::BTreeMap::new();
    for (j, &lat) in data.lat.iter().enumerate() {
        for (i, &lon) in data.lon.iter().enumerate() {
            let (x, y) = area.px(lon, lat);
            let covering: Vec<&String> = rects
                .iter()
                .filter(|(rx, ry, rw, rh, _)| x > *rx && x < rx + rw && y > *ry && y < ry + rh)
                .map(|r| &r.4)
                .collect();
            if masked(j, i) {
                assert!(covering.is_empty(), "masked cell {j},{i} is shaded");
            } else {
                assert_eq!(covering.len(), 1, "cell {j},{i} shaded {} times", covering.len());
                fills.entry(j).or_insert_with(Vec::new).push(covering[0].clone());
            }
        }
    }
    // The gradient is (j + 0.5)/10 K per 100 km: one shade along a row, darker classes
    // northward (rows 0..4 below 0.5, 5..9 from 0.5 to 1, ...).
    for shades in fills.values() {
        assert!(shades.iter().all(|s| s == &shades[0]));
    }
    assert_ne!(fills[&0][0], fills[&29][0]);
    assert_eq!(fills[&0][0], fills[&4][0]);
    assert_ne!(fills[&4][0], fills[&5][0]);
    let bar = with_class(&doc, "g", "colour-bar");
    assert_eq!(bar.len(), 1);
    assert!(bar[0].descendants().any(|n| text(&n).contains("K per")));
}

#[test]
fn map_across_the_antimeridian_is_continuous() {
    // 40 columns from 165°E eastward: 165..180, then -179..-156.
    let mut data = synthetic(165.0, 30, 40);
    for lon in &mut data.lon {
        if *lon > 180.0 {
            *lon -= 360.0;
        }
    }
    let svg = map_svg(&data.field(), &caption(), &MapOptions::default()).unwrap();
    let doc = parse(&svg);
    let area = PlotArea::read(&doc);
    assert_eq!(area.bbox, [164.5, 29.5, 204.5, 59.5]);
    let arrows = with_class(&doc, "g", "arrow");
    let lons: Vec<f64> = arrows.iter().map(|a| attr(a, "data-lon")).collect();
    assert!(lons.iter().any(|&l| l > 180.0), "{lons:?}");
    // Along one row the arrows go west to east, left to right.
    let row: Vec<(f64, f64)> = arrows
        .iter()
        .filter(|a| attr(a, "data-lat") == 30.0)
        .map(|a| {
            let shaft = a.descendants().find(|n| n.has_tag_name("line")).unwrap();
            (attr(a, "data-lon"), 0.5 * (attr(&shaft, "x1") + attr(&shaft, "x2")))
        })
        .collect();
    assert!(row.len() > 3);
    assert!(row.windows(2).all(|w| w[1].0 > w[0].0 && w[1].1 > w[0].1), "{row:?}");
    let labels: Vec<String> = with_class(&doc, "g", "graticule")[0]
        .descendants()
        .filter(|n| n.has_tag_name("text"))
        .map(|n| text(&n))
        .collect();
    assert!(labels.iter().any(|l| l.ends_with("°W")), "{labels:?}");
    assert!(labels.iter().any(|l| l.ends_with("°E")), "{labels:?}");
    assert!(labels.iter().any(|l| l.ends_with("°N")), "{labels:?}");
}

/// A box cut from a block that wraps the whole circle: its columns come in box order and
/// are unwrapped again, so the picture is continuous across the block's seam.
#[test]
fn a_selection_across_the_seam_of_a_circle_is_continuous() {
    let lat: Vec<f64> = (0..6).map(|j| 40.0 + 10.0 * j as f64).collect();
    let lon: Vec<f64> = (0..36).map(|i| 10.0 * i as f64).collect();
    let a = Array2::from_shape_fn((6, 36), |(j, i)| (1000 * j + i) as f32);
    let wind = Array2::from_elem((6, 36), 10.0_f32);
    let block =
        LayerField::new(&lat, &lon, a.view(), (wind.view(), wind.view()), a.view(), (850.0, 300.0))
            .unwrap();
    let field = block.select(1..4, &[34, 35, 0, 1, 2]).unwrap();
    assert_eq!(field.lon(), [-20.0, -10.0, 0.0, 10.0, 20.0]);
    assert_eq!(field.lat(), [50.0, 60.0, 70.0]);
    assert_eq!(field.extent(), [-25.0, 45.0, 25.0, 75.0]);
    let svg = map_svg(&field, &caption(), &MapOptions::default()).unwrap();
    let doc = parse(&svg);
    let arrows: Vec<(f64, f64)> = with_class(&doc, "g", "arrow")
        .iter()
        .map(|a| (attr(a, "data-lat"), attr(a, "data-lon")))
        .collect();
    let want: Vec<(f64, f64)> = [50.0, 60.0, 70.0]
        .iter()
        .flat_map(|&la| [-20.0, -10.0, 0.0, 10.0, 20.0].map(|lo| (la, lo)))
        .collect();
    assert_eq!(arrows, want);
}

#[test]
fn bad_inputs_are_typed_errors() {
    let data = synthetic(-20.0, 30, 40);
    let short = Array2::<f32>::zeros((30, 39));
    let err = LayerField::new(
        &data.lat,
        &data.lon,
        short.view(),
        (data.u.view(), data.v.view()),
        data.gradient.view(),
        (1000.0, 500.0),
    )
    .unwrap_err();
    assert_eq!(
        err,
        RenderError::ShapeMismatch { what: "thickness", expected: (30, 40), got: (30, 39) }
    );
    let field = data.field();
    let zero = MapOptions { stride: Some(0), ..MapOptions::default() };
    assert!(matches!(map_svg(&field, &caption(), &zero), Err(RenderError::BadOption { .. })));
    let flat = MapOptions { contour_interval_m: 0.0, ..MapOptions::default() };
    assert!(matches!(map_svg(&field, &caption(), &flat), Err(RenderError::BadOption { .. })));
    // 50 × 200 cells at stride 1 exceed the arrow limit; the error names a stride that fits.
    let big = synthetic(-100.0, 50, 200);
    let err = map_svg(
        &LayerField::new(
            &big.lat,
            &big.lon,
            big.thickness.view(),
            (big.u.view(), big.v.view()),
            big.gradient.view(),
            (1000.0, 500.0),
        )
        .unwrap(),
        &caption(),
        &MapOptions { stride: Some(1), ..MapOptions::default() },
    )
    .unwrap_err();
    let RenderError::TooManyArrows { fits, .. } = err else { panic!("{err:?}") };
    assert!(50usize.div_ceil(fits) * 200usize.div_ceil(fits) <= MAX_ARROWS);
    assert!(50usize.div_ceil(fits - 1) * 200usize.div_ceil(fits - 1) > MAX_ARROWS);
    assert!(field.select(0..0, &[0, 1]).is_err());
    assert!(field.select(0..3, &[0, 40]).is_err());
}

/// The kernel's own output on a small grid, through both pictures: the hodograph's points
/// are the profile's levels and the map's arrows its defined decimated cells; the equatorial
/// band (|φ| < 5°, masked by the kernel) gets no arrow.
#[test]
fn kernel_output_draws() {
    let lat: Vec<f64> = (0..21).map(|j| -2.0 + 2.0 * j as f64).collect();
    let lon: Vec<f64> = (0..25).map(|i| -24.0 + 2.0 * i as f64).collect();
    let grid = Grid::new(lat.clone(), lon.clone()).unwrap();
    let levels = Levels::from_pa(vec![100_000.0, 85_000.0, 50_000.0]).unwrap();
    let z = ndarray::Array3::from_shape_fn((3, 21, 25), |(k, j, i)| {
        let base = [100.0, 1450.0, 5500.0][k];
        base + (k as f32 + 1.0) * (2.0 * j as f32 + 0.3 * i as f32)
    });
    let t = ndarray::Array3::from_shape_fn((3, 21, 25), |(k, j, _)| {
        [285.0, 275.0, 255.0][k] - 0.4 * j as f32
    });
    let fields =
        FieldsBuilder::new(grid, levels).geopotential_height(z).temperature(t).build().unwrap();
    let layers = vec![fields.levels().layer(1000.0, 500.0).unwrap()];
    let deep = compute(&fields, &layers, &Config::default());
    let map =
        LayerField::from_diagnostics(fields.grid(), fields.levels(), &deep.layers[0]).unwrap();
    let svg = map_svg(&map, &caption(), &MapOptions { stride: Some(2), ..MapOptions::default() })
        .unwrap();
    let doc = parse(&svg);
    let layer = &deep.layers[0];
    let want = (0..21)
        .step_by(2)
        .flat_map(|j| (0..25).step_by(2).map(move |i| (j, i)))
        .filter(|&(j, i)| layer.thermal_wind_u[[j, i]].is_finite())
        .count();
    let arrows = with_class(&doc, "g", "arrow");
    assert_eq!(arrows.len(), want);
    assert!(arrows.iter().all(|a| attr(a, "data-lat").abs() >= 5.0));
    assert!(want < 11 * 13, "the equatorial band masks some cells");

    let adjacent = fields.levels().adjacent_layers();
    let diag = compute(&fields, &adjacent, &Config::default());
    let bbox = BBox::new(-10.0, 10.0, 10.0, 30.0).unwrap();
    let profile = box_profile(&fields, &diag, &bbox).unwrap();
    let svg = hodograph_svg(&profile, &caption()).unwrap();
    let doc = parse(&svg);
    assert_eq!(with_class(&doc, "circle", "level").len(), 3);
    assert_eq!(with_class(&doc, "line", "layer-segment").len(), 2);
}
