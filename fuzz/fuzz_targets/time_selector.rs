//! `TimeSelector::parse`, the time of `--time`, `--from`, `--to` and `time=`: any text gives a
//! selector or an error, never a panic; the canonical form it gives parses to itself.
#![no_main]

use libfuzzer_sys::fuzz_target;
use shearbox_cf::TimeSelector;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    if let Ok(TimeSelector::At(canonical)) = TimeSelector::parse(text) {
        assert_eq!(TimeSelector::parse(&canonical).ok(), Some(TimeSelector::At(canonical.clone())));
    }
});
