//! The service's TOML configuration: any text gives a configuration or an error naming what is
//! wrong, never a panic.
#![no_main]

use libfuzzer_sys::fuzz_target;
use shearbox_server::config::ServeConfig;

fuzz_target!(|data: &[u8]| {
    let Ok(text) = std::str::from_utf8(data) else { return };
    if let Ok(config) = ServeConfig::from_toml(text, std::path::Path::new("/nonexistent")) {
        let _ = config.validate();
    }
});
