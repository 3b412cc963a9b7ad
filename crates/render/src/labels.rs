//! Words and numbers shown on the pictures: coordinates, boxes, pressures.

use shearbox_core::BBox;

use crate::svg::num;

/// A longitude as `30°W`, `0°`, `170°E`; any representation, shown within ±180°
/// (180° itself as `180°`).
pub(crate) fn lon_label(lon: f64) -> String {
    let l = (lon + 180.0).rem_euclid(360.0) - 180.0;
    let l = if (l + 180.0).abs() < 1e-9 { 180.0 } else { l };
    let text = num(l.abs(), 2);
    if text == "0" || text == "180" {
        format!("{text}°")
    } else if l < 0.0 {
        format!("{text}°W")
    } else {
        format!("{text}°E")
    }
}

/// A latitude as `50°N`, `0°`, `35°S`.
pub(crate) fn lat_label(lat: f64) -> String {
    let text = num(lat.abs(), 2);
    if text == "0" {
        "0°".into()
    } else if lat < 0.0 {
        format!("{text}°S")
    } else {
        format!("{text}°N")
    }
}

/// A box as `30°W–10°W, 42°N–56°N`.
pub(crate) fn box_label(b: &BBox) -> String {
    format!(
        "{}–{}, {}–{}",
        lon_label(b.west),
        lon_label(b.east),
        lat_label(b.south),
        lat_label(b.north)
    )
}

/// A box as the `W,S,E,N` of a request.
pub(crate) fn box_numbers(b: &BBox) -> String {
    format!("{},{},{},{}", num(b.west, 4), num(b.south, 4), num(b.east, 4), num(b.north, 4))
}

/// A pressure in hPa from Pa.
pub(crate) fn hpa(pa: f64) -> String {
    num(pa / 100.0, 2)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn coordinates_read_as_on_a_chart() {
        assert_eq!(lon_label(-30.0), "30°W");
        assert_eq!(lon_label(190.0), "170°W");
        assert_eq!(lon_label(180.0), "180°");
        assert_eq!(lon_label(-180.0), "180°");
        assert_eq!(lon_label(0.0), "0°");
        assert_eq!(lon_label(12.5), "12.5°E");
        assert_eq!(lat_label(-35.0), "35°S");
        assert_eq!(lat_label(0.0), "0°");
        assert_eq!(hpa(92_500.0), "925");
        let b = BBox::new(170.0, -10.0, -170.0, 10.0).unwrap();
        assert_eq!(box_label(&b), "170°E–170°W, 10°S–10°N");
        assert_eq!(box_numbers(&b), "170,-10,-170,10");
    }
}
