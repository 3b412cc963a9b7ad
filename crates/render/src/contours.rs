//! Contour lines of a gridded field at multiples of an interval.
//!
//! The marching squares come from the `contour` crate, run in index space with linear
//! interpolation along cell edges. Its rings are closed: they run along the border of the
//! grid, and it treats a missing (NaN) value as lying below every threshold, so a ring also
//! runs around each hole. Neither is a contour of the field, so every ring is cut into the
//! pieces that lie in cells whose four corners are defined: a line never crosses or follows a
//! masked cell or the grid's edge.

use contour::ContourBuilder;
use ndarray::ArrayView2;

use crate::RenderError;

/// At most this many contour values in one picture; more would be an unreadable smear.
pub(crate) const MAX_CONTOUR_VALUES: usize = 200;

/// A contour line: its value and its points as fractional (column, row) indices.
#[derive(Debug, Clone, PartialEq)]
pub(crate) struct ContourLine {
    /// The contoured value.
    pub value: f64,
    /// Points, (column, row) in index units.
    pub points: Vec<(f64, f64)>,
}

/// The multiples of `interval` inside the range of the finite values of `field`.
pub(crate) fn levels(field: ArrayView2<'_, f32>, interval: f64) -> Result<Vec<f64>, RenderError> {
    let (lo, hi) = field
        .iter()
        .filter(|v| v.is_finite())
        .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), &v| {
            (lo.min(f64::from(v)), hi.max(f64::from(v)))
        });
    if lo > hi {
        return Ok(Vec::new());
    }
    let (first, last) = ((lo / interval).ceil(), (hi / interval).floor());
    let count = if last >= first { (last - first) as usize + 1 } else { 0 };
    if count > MAX_CONTOUR_VALUES {
        return Err(RenderError::BadOption {
            option: "contour interval",
            value: format!("{interval} (it gives {count} contour values)"),
            expected: "an interval that gives at most 200 contour values over the field's range",
        });
    }
    Ok((0..count).map(|k| (first + k as f64) * interval).collect())
}

/// The contour lines of `field` (rows × columns) at `values`.
pub(crate) fn contour_lines(
    field: ArrayView2<'_, f32>,
    values: &[f64],
) -> Result<Vec<ContourLine>, RenderError> {
    let (ny, nx) = field.dim();
    if nx < 2 || ny < 2 || values.is_empty() {
        return Ok(Vec::new());
    }
    let data: Vec<f64> = field.iter().map(|&v| f64::from(v)).collect();
    // Cell (i, j) has corners (i, j), (i + 1, j), (i, j + 1), (i + 1, j + 1).
    let cell_ok: Vec<bool> = (0..(ny - 1) * (nx - 1))
        .map(|c| {
            let (j, i) = (c / (nx - 1), c % (nx - 1));
            [(j, i), (j, i + 1), (j + 1, i), (j + 1, i + 1)]
                .iter()
                .all(|&(r, q)| data[r * nx + q].is_finite())
        })
        .collect();
    let good_segment = |a: (f64, f64), b: (f64, f64)| -> bool {
        let (mx, my) = (0.5 * (a.0 + b.0), 0.5 * (a.1 + b.1));
        if !(a.0.is_finite() && a.1.is_finite() && b.0.is_finite() && b.1.is_finite()) {
            return false;
        }
        let (ci, cj) = (mx.floor(), my.floor());
        if ci < 0.0 || cj < 0.0 || ci > (nx - 2) as f64 || cj > (ny - 2) as f64 {
            return false;
        }
        cell_ok[cj as usize * (nx - 1) + ci as usize]
    };
    let builder = ContourBuilder::new(nx, ny, true);
    let lines = builder
        .lines(&data, values)
        .map_err(|e| RenderError::Drawing(format!("contouring failed: {e:?}")))?;
    let mut out = Vec::new();
    for line in lines {
        let value = line.threshold();
        for ring in &line.geometry().0 {
            // The crate puts value (i, j) at (i + 0.5, j + 0.5).
            let pts: Vec<(f64, f64)> = ring.0.iter().map(|c| (c.x - 0.5, c.y - 0.5)).collect();
            for points in pieces(&pts, &good_segment) {
                out.push(ContourLine { value, points });
            }
        }
    }
    Ok(out)
}

/// The runs of consecutive good segments of a ring, as polylines; a closed ring cut in
/// places has its last run joined to its first.
fn pieces(
    pts: &[(f64, f64)],
    good: &impl Fn((f64, f64), (f64, f64)) -> bool,
) -> Vec<Vec<(f64, f64)>> {
    if pts.len() < 2 {
        return Vec::new();
    }
    let closed = pts.first() == pts.last();
    let ok: Vec<bool> = pts.windows(2).map(|w| good(w[0], w[1])).collect();
    if ok.iter().all(|&b| b) {
        return vec![pts.to_vec()];
    }
    let mut runs: Vec<Vec<(f64, f64)>> = Vec::new();
    let mut current: Vec<(f64, f64)> = Vec::new();
    for (k, &good) in ok.iter().enumerate() {
        if good {
            if current.is_empty() {
                current.push(pts[k]);
            }
            current.push(pts[k + 1]);
        } else if !current.is_empty() {
            runs.push(std::mem::take(&mut current));
        }
    }
    if !current.is_empty() {
        runs.push(current);
    }
    if closed && ok[0] && ok[ok.len() - 1] && runs.len() > 1 {
        let first = runs.remove(0);
        let last = runs.last_mut().expect("more than one run");
        last.extend(first.into_iter().skip(1));
    }
    runs
}

#[cfg(test)]
mod tests {
    use ndarray::Array2;

    use super::*;

    /// A field growing by 10 per column: the contour of 25 is the vertical line at column
    /// 2.5, from the first row to the last, and nothing runs along the grid's edge.
    #[test]
    fn a_linear_field_gives_straight_lines_where_the_value_is() {
        let field = Array2::from_shape_fn((5, 6), |(_, i)| 10.0 * i as f32);
        let values = levels(field.view(), 25.0).unwrap();
        assert_eq!(values, [0.0, 25.0, 50.0]);
        let lines = contour_lines(field.view(), &[25.0]).unwrap();
        assert_eq!(lines.len(), 1, "{lines:?}");
        let line = &lines[0];
        assert!(line.points.iter().all(|&(x, _)| (x - 2.5).abs() < 1e-9), "{line:?}");
        let ys: Vec<f64> = line.points.iter().map(|p| p.1).collect();
        let (lo, hi) = ys.iter().fold((f64::MAX, f64::MIN), |(a, b), &y| (a.min(y), b.max(y)));
        assert_eq!((lo, hi), (0.0, 4.0));
    }

    #[test]
    fn no_line_enters_a_cell_with_a_missing_corner() {
        let mut field = Array2::from_shape_fn((7, 7), |(j, i)| (i + j) as f32);
        field[[3, 3]] = f32::NAN;
        let values = levels(field.view(), 1.0).unwrap();
        let lines = contour_lines(field.view(), &values).unwrap();
        assert!(!lines.is_empty());
        for line in &lines {
            for w in line.points.windows(2) {
                let (mx, my) = (0.5 * (w[0].0 + w[1].0), 0.5 * (w[0].1 + w[1].1));
                let near_hole = (2.0..4.0).contains(&mx) && (2.0..4.0).contains(&my);
                assert!(!near_hole, "segment {w:?} of {} crosses the masked node", line.value);
            }
        }
    }

    #[test]
    fn too_fine_an_interval_is_refused() {
        let field = Array2::from_shape_fn((3, 3), |(_, i)| 1000.0 * i as f32);
        assert!(matches!(levels(field.view(), 1.0), Err(RenderError::BadOption { .. })));
        let empty = Array2::from_elem((3, 3), f32::NAN);
        assert!(levels(empty.view(), 60.0).unwrap().is_empty());
    }
}
