//! The horizontal grid, bounding boxes and index selections.
//!
//! Longitudes are kept as the reader delivered them and every longitude difference is taken
//! modulo 360°. That is what makes a sub-box read across the antimeridian of a periodic grid
//! bit-identical to the whole grid: the stencil at a column sees the same two longitude values
//! and forms the same difference whether the column sits in the middle of a sub-box or at the
//! seam of the full circle.

use std::ops::Range;

use crate::CoreError;

/// Tolerance, in degrees, for comparing coordinates with box edges and the poles.
const EPS_DEG: f64 = 1e-9;

/// A latitude–longitude grid: latitudes strictly increasing (south to north), longitudes
/// strictly increasing modulo 360° and spanning less than the full circle.
///
/// A grid is *periodic* in longitude when its longitudes cover the circle (n·Δλ within half a
/// spacing of 360°, physics.md "Grid"); derivatives then wrap around.
#[derive(Debug, Clone, PartialEq)]
pub struct Grid {
    lat: Vec<f64>,
    lon: Vec<f64>,
    periodic: bool,
    rows: Vec<Stencil>,
    cols: Vec<Stencil>,
}

/// The neighbours and the coordinate distance (radians) of a centred or one-sided difference.
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct Stencil {
    pub minus: usize,
    pub plus: usize,
    /// 1 / (coordinate[plus] − coordinate[minus]) in radians⁻¹.
    pub inv_delta: f64,
}

impl Grid {
    /// Builds a grid from latitudes (degrees, strictly increasing, within ±90°) and
    /// longitudes (degrees, strictly increasing modulo 360°, span below 360°). Detects
    /// whether the longitudes are periodic.
    pub fn new(lat: Vec<f64>, lon: Vec<f64>) -> Result<Self, CoreError> {
        if lat.len() < 2 {
            return Err(CoreError::TooShort { axis: "latitude", len: lat.len(), min: 2 });
        }
        if lon.len() < 2 {
            return Err(CoreError::TooShort { axis: "longitude", len: lon.len(), min: 2 });
        }
        for &value in lat.iter().chain(&lon) {
            if !value.is_finite() {
                return Err(CoreError::OutOfRange {
                    axis: "coordinate",
                    value,
                    expected: "a finite number",
                });
            }
        }
        if let Some(&value) = lat.iter().find(|v| v.abs() > 90.0 + EPS_DEG) {
            return Err(CoreError::OutOfRange {
                axis: "latitude",
                value,
                expected: "-90 to 90 degrees",
            });
        }
        for (index, w) in lat.windows(2).enumerate() {
            if w[1] <= w[0] {
                return Err(CoreError::NotMonotonic {
                    axis: "latitude",
                    index: index + 1,
                    prev: w[0],
                    next: w[1],
                });
            }
        }
        let mut span = 0.0;
        for (index, w) in lon.windows(2).enumerate() {
            let step = lon_diff(w[0], w[1]);
            span += step;
            if step <= 0.0 || span >= 360.0 - EPS_DEG {
                return Err(CoreError::NotMonotonic {
                    axis: "longitude",
                    index: index + 1,
                    prev: w[0],
                    next: w[1],
                });
            }
        }
        let n = lon.len() as f64;
        let spacing = span / (n - 1.0);
        let periodic = (n * spacing - 360.0).abs() <= 0.5 * spacing;
        let rows = stencils(lat.len(), false, |a, b| (lat[b] - lat[a]).to_radians());
        let cols = stencils(lon.len(), periodic, |a, b| lon_diff(lon[a], lon[b]).to_radians());
        Ok(Self { lat, lon, periodic, rows, cols })
    }

    /// Number of latitude rows.
    pub fn n_lat(&self) -> usize {
        self.lat.len()
    }

    /// Number of longitude columns.
    pub fn n_lon(&self) -> usize {
        self.lon.len()
    }

    /// Latitudes in degrees, south to north.
    pub fn lat(&self) -> &[f64] {
        &self.lat
    }

    /// Longitudes in degrees, as delivered (increasing modulo 360°).
    pub fn lon(&self) -> &[f64] {
        &self.lon
    }

    /// Whether the longitudes cover the full circle, so that derivatives wrap around.
    pub fn is_periodic(&self) -> bool {
        self.periodic
    }

    /// Whether row `lat_idx` is a pole row (|φ| = 90°), where zonal derivatives are singular.
    pub fn is_pole_row(&self, lat_idx: usize) -> bool {
        self.lat[lat_idx].abs() >= 90.0 - EPS_DEG
    }

    pub(crate) fn row_stencil(&self, lat_idx: usize) -> Stencil {
        self.rows[lat_idx]
    }

    pub(crate) fn col_stencils(&self) -> &[Stencil] {
        &self.cols
    }

    /// The smallest block of rows and columns that holds every cell whose centre lies inside
    /// `bbox` (edges included). `None` when no cell centre is inside.
    pub fn select(&self, bbox: &BBox) -> Option<Selection> {
        let first = self.lat.iter().position(|&p| p >= bbox.south - EPS_DEG)?;
        let end = self.lat.iter().rposition(|&p| p <= bbox.north + EPS_DEG)? + 1;
        if first >= end {
            return None;
        }
        let inside: Vec<bool> = self.lon.iter().map(|&l| bbox.contains_lon(l)).collect();
        let n = inside.len();
        let cols = if inside.iter().all(|&b| b) {
            ColSpan { start: 0, len: n }
        } else if self.periodic {
            // On the circle the inside cells form one arc: it starts after an outside cell.
            let start = (0..n).find(|&i| inside[i] && !inside[(i + n - 1) % n])?;
            let len = (0..n).take_while(|&k| inside[(start + k) % n]).count();
            ColSpan { start, len }
        } else {
            let start = inside.iter().position(|&b| b)?;
            let last = inside.iter().rposition(|&b| b)?;
            ColSpan { start, len: last - start + 1 }
        };
        Some(Selection { rows: first..end, cols, n_lon: n, periodic: self.periodic })
    }

    /// [`Grid::select`], with an error that states the grid's extent when no cell centre lies
    /// inside the box.
    pub fn select_box(&self, bbox: &BBox) -> Result<Selection, CoreError> {
        self.select(bbox).ok_or_else(|| CoreError::EmptyBox {
            west: bbox.west,
            south: bbox.south,
            east: bbox.east,
            north: bbox.north,
            lat_min: self.lat[0],
            lat_max: self.lat[self.lat.len() - 1],
            lon_min: self.lon[0],
            lon_max: self.lon[self.lon.len() - 1],
        })
    }

    /// The sub-grid of a selection, with longitudes copied as they are (no unwrapping).
    pub fn subset(&self, sel: &Selection) -> Grid {
        let lat = self.lat[sel.rows.clone()].to_vec();
        let lon = sel.col_indices().map(|i| self.lon[i]).collect();
        Grid::new(lat, lon).expect("a selection of a valid grid is a valid grid")
    }

    /// Whether the centre of cell (`lat_idx`, `lon_idx`) lies inside `bbox`.
    pub fn cell_in_box(&self, lat_idx: usize, lon_idx: usize, bbox: &BBox) -> bool {
        self.row_in_box(lat_idx, bbox) && bbox.contains_lon(self.lon[lon_idx])
    }

    /// Whether the latitude of row `lat_idx` lies within the box's south and north edges.
    pub fn row_in_box(&self, lat_idx: usize, bbox: &BBox) -> bool {
        let lat = self.lat[lat_idx];
        lat >= bbox.south - EPS_DEG && lat <= bbox.north + EPS_DEG
    }
}

/// `b − a` in degrees, taken in [0, 360).
fn lon_diff(a: f64, b: f64) -> f64 {
    (b - a).rem_euclid(360.0)
}

fn stencils(n: usize, periodic: bool, delta: impl Fn(usize, usize) -> f64) -> Vec<Stencil> {
    (0..n)
        .map(|i| {
            let (minus, plus) = if periodic {
                ((i + n - 1) % n, (i + 1) % n)
            } else if i == 0 {
                (0, 1)
            } else if i == n - 1 {
                (n - 2, n - 1)
            } else {
                (i - 1, i + 1)
            };
            Stencil { minus, plus, inv_delta: 1.0 / delta(minus, plus) }
        })
        .collect()
}

/// A box in degrees in GeoJSON / OGC bbox order (west, south, east, north). West > east means
/// the box crosses the antimeridian.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct BBox {
    /// Western edge, degrees east.
    pub west: f64,
    /// Southern edge, degrees north.
    pub south: f64,
    /// Eastern edge, degrees east.
    pub east: f64,
    /// Northern edge, degrees north.
    pub north: f64,
}

impl BBox {
    /// Validates a box: finite values, latitudes within ±90° with south ≤ north, longitudes
    /// within −360..360°.
    pub fn new(west: f64, south: f64, east: f64, north: f64) -> Result<Self, CoreError> {
        let bad = |reason: String| Err(CoreError::InvalidBBox { reason });
        if ![west, south, east, north].iter().all(|v| v.is_finite()) {
            return bad("every value must be a finite number".into());
        }
        if !(-90.0..=90.0).contains(&south) || !(-90.0..=90.0).contains(&north) {
            return bad(format!(
                "latitudes must lie within -90..90 (got south {south}, north {north})"
            ));
        }
        if south > north {
            return bad(format!("south ({south}) is north of north ({north})"));
        }
        if !(-360.0..=360.0).contains(&west) || !(-360.0..=360.0).contains(&east) {
            return bad(format!(
                "longitudes must lie within -360..360 (got west {west}, east {east})"
            ));
        }
        Ok(Self { west, south, east, north })
    }

    /// Parses `W,S,E,N`.
    pub fn parse(text: &str) -> Result<Self, CoreError> {
        let parts: Vec<&str> = text.split(',').map(str::trim).collect();
        if parts.len() != 4 {
            return Err(CoreError::InvalidBBox {
                reason: format!(
                    "expected four comma-separated numbers, got {} in {text:?}",
                    parts.len()
                ),
            });
        }
        let mut v = [0.0; 4];
        for (slot, part) in v.iter_mut().zip(&parts) {
            *slot = part.parse().map_err(|_| CoreError::InvalidBBox {
                reason: format!("{part:?} is not a number"),
            })?;
        }
        Self::new(v[0], v[1], v[2], v[3])
    }

    /// Width of the box in degrees of longitude, eastward from west to east, in [0, 360]; a
    /// box whose east lies 360° or more east of its west covers the whole circle. West > east
    /// crosses the antimeridian, whatever representation the two values use (170, −340 is
    /// the 210° from 170°E east to 20°E).
    pub fn width(&self) -> f64 {
        let d = self.east - self.west;
        if d >= 360.0 { 360.0 } else { d.rem_euclid(360.0) }
    }

    /// Whether a longitude (any representation) lies inside the box, edges included.
    pub fn contains_lon(&self, lon: f64) -> bool {
        let width = self.width();
        if width >= 360.0 {
            return true;
        }
        let d = (lon - self.west).rem_euclid(360.0);
        d <= width + EPS_DEG || d >= 360.0 - EPS_DEG
    }
}

/// A block of grid indices: a row range and a run of columns that may wrap around a periodic
/// grid.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct Selection {
    /// Row (latitude) indices.
    pub rows: Range<usize>,
    /// Column (longitude) run.
    pub cols: ColSpan,
    n_lon: usize,
    periodic: bool,
}

/// A run of `len` columns starting at `start`, wrapping modulo the number of columns.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct ColSpan {
    /// First column index.
    pub start: usize,
    /// Number of columns.
    pub len: usize,
}

impl Selection {
    /// The selection grown by one cell on every side that has a neighbour: clamped at the
    /// edges of a regional grid and of the latitude range, wrapping on a periodic grid. This
    /// is the block to read so that every selected cell gets the same centred stencil as on
    /// the whole grid.
    pub fn with_halo(&self, n_lat: usize) -> Selection {
        let rows = self.rows.start.saturating_sub(1)..(self.rows.end + 1).min(n_lat);
        let n = self.n_lon;
        let cols = if self.periodic {
            if self.cols.len + 2 >= n {
                ColSpan { start: 0, len: n }
            } else {
                ColSpan { start: (self.cols.start + n - 1) % n, len: self.cols.len + 2 }
            }
        } else {
            let start = self.cols.start.saturating_sub(1);
            let end = (self.cols.start + self.cols.len + 1).min(n);
            ColSpan { start, len: end - start }
        };
        Selection { rows, cols, n_lon: n, periodic: self.periodic }
    }

    /// Column indices in order, wrapping around.
    pub fn col_indices(&self) -> impl Iterator<Item = usize> + '_ {
        (0..self.cols.len).map(move |k| (self.cols.start + k) % self.n_lon)
    }

    /// The column run as at most two contiguous index ranges (two when it wraps), in order.
    #[allow(clippy::single_range_in_vec_init)] // one range is the common case, not a mistake
    pub fn col_ranges(&self) -> Vec<Range<usize>> {
        let end = self.cols.start + self.cols.len;
        if end <= self.n_lon {
            vec![self.cols.start..end]
        } else {
            vec![self.cols.start..self.n_lon, 0..end - self.n_lon]
        }
    }

    /// Number of cells in the block.
    pub fn n_cells(&self) -> usize {
        self.rows.len() * self.cols.len
    }
}
