//! CF time units (`"<unit> since <date>"`) and the decoding of time values in every CF
//! calendar, as a file's time coordinate brings them: no panic, whatever the text and value.
#![no_main]

use libfuzzer_sys::fuzz_target;
use shearbox_cf::Calendar;
use shearbox_cf::calendar::{decode_with, parse_units};

fuzz_target!(|data: &[u8]| {
    if data.len() < 8 {
        return;
    }
    let value = f64::from_le_bytes(data[..8].try_into().expect("8 bytes"));
    let Ok(text) = std::str::from_utf8(&data[8..]) else { return };
    let Ok(units) = parse_units(text) else { return };
    for name in ["standard", "proleptic_gregorian", "julian", "noleap", "all_leap", "360_day"] {
        let calendar = Calendar::from_cf_name(name).expect("a CF calendar");
        for v in [value, 0.0, -1.0, 1e6] {
            let _ = decode_with(v, &units, calendar);
        }
    }
});
