//! `BBox::parse`, the box of `--bbox`, `--box`, region files and `bbox=`: any text gives a box
//! or an error, never a panic; a box it gives is finite and ordered south to north.
#![no_main]

use libfuzzer_sys::fuzz_target;
use shearbox_core::BBox;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    if let Ok(b) = BBox::parse(text) {
        assert!(
            b.west.is_finite() && b.east.is_finite() && b.south.is_finite() && b.north.is_finite()
        );
        assert!(b.south <= b.north, "{b:?}");
        assert!(b.width() >= 0.0 && b.width() <= 360.0, "{b:?}");
    }
});
