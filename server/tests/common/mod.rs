//! What the handler tests and the end-to-end tests share: the fixtures, a configuration
//! serving three of them, and the table of bad requests.

#![allow(dead_code)] // each test binary uses its own part

use std::path::{Path, PathBuf};

use shearbox_server::config::ServeConfig;

/// The committed fixtures.
pub fn fixtures() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures")
}

/// Three fixtures as `tidy`, `global` and `temperature_only`, after the TOML lines `extra`.
pub fn config(extra: &str) -> ServeConfig {
    let text = format!(
        "{extra}\n[datasets]\ntidy = \"tidy_nc4.nc\"\nglobal = \"global_noleap.nc\"\n\
         temperature_only = \"temperature_only.nc\"\n"
    );
    ServeConfig::from_toml(&text, &fixtures()).expect("valid configuration")
}

/// A request that must fail.
pub type BadRequest = (String, u16, &'static str, &'static [&'static str]);

/// Each malformed or impossible request on the `tidy` dataset (`tidy_nc4.nc`: latitudes
/// 20..70, levels 1000, 925, 850, 700, 500, 400, 300, 250, 200 hPa, three times from
/// 2026-01-14T00:00:00Z to 2026-01-14T12:00:00Z): the URI, the status, the code, and words
/// the message must hold.
pub fn bad_requests() -> Vec<BadRequest> {
    let p = "/v1/datasets/tidy/profile";
    let l = "/v1/datasets/tidy/layer";
    vec![
        (format!("{p}?bbox=1,2,3"), 400, "invalid_bbox", &["four comma-separated numbers"]),
        (format!("{p}?bbox=a,40,10,50"), 400, "invalid_bbox", &["\"a\" is not a number"]),
        (format!("{p}?bbox=0,60,10,50"), 400, "invalid_bbox", &["south (60) is north of north"]),
        (format!("{p}?bbox=0,40,1e400,50"), 400, "invalid_bbox", &["finite"]),
        (format!("{p}?bbox=NaN,40,10,50"), 400, "invalid_bbox", &["finite"]),
        (format!("{p}?bbox=100,0,120,10"), 400, "empty_box", &["latitudes 20..70"]),
        (p.to_string(), 400, "missing_parameter", &["bbox is required"]),
        (
            "/v1/datasets/nope/profile?bbox=0,40,10,50".into(),
            404,
            "unknown_dataset",
            &["global, temperature_only, tidy"],
        ),
        (
            "/v1/datasets/..%2F..%2Fetc%2Fpasswd".into(),
            404,
            "unknown_dataset",
            &["no dataset named"],
        ),
        (
            format!("{p}?bbox=0,40,10,50&time=2030-01-01T00:00Z"),
            400,
            "time_not_found",
            &[
                "2030-01-01T00:00:00Z",
                "3 step(s) from 2026-01-14T00:00:00Z to 2026-01-14T12:00:00Z",
            ],
        ),
        (format!("{p}?bbox=0,40,10,50&time=yesterday"), 400, "invalid_time", &["ISO 8601"]),
        (
            format!("{l}?bottom=1000&top=600&bbox=0,40,10,50"),
            400,
            "level_not_found",
            &["600", "925"],
        ),
        (
            format!("{l}?bottom=500&top=1000&bbox=0,40,10,50"),
            400,
            "invalid_layer",
            &["bottom pressure"],
        ),
        (format!("{l}?top=500&bbox=0,40,10,50"), 400, "missing_parameter", &["bottom is required"]),
        (format!("{l}?bottom=abc&top=500&bbox=0,40,10,50"), 400, "invalid_parameter", &["\"abc\""]),
        (
            format!("{l}?bottom=1000&top=500&bbox=0,40,10,50&grid=true&stride=0"),
            400,
            "invalid_stride",
            &["at least 1"],
        ),
        (
            format!("{l}?bottom=1000&top=500&bbox=0,40,10,50&grid=true&stride=-2"),
            400,
            "invalid_stride",
            &["at least 1"],
        ),
        (
            format!("{l}?bottom=1000&top=500&bbox=0,40,10,50&grid=maybe"),
            400,
            "invalid_parameter",
            &["true or false"],
        ),
        (
            format!("{p}?bbox=0,40,10,50&foo=1"),
            400,
            "unknown_parameter",
            &["\"foo\"", "bbox, time"],
        ),
        (format!("{p}?bbox=0,40,10,50&bbox=0,40,10,50"), 400, "duplicate_parameter", &["bbox"]),
        ("/v1/datasets?limit=3".into(), 400, "unknown_parameter", &["\"limit\""]),
        ("/v2/anything".into(), 404, "not_found", &["/openapi.json"]),
        (
            "/v1/datasets/%FF/profile?bbox=0,40,10,50".into(),
            400,
            "invalid_parameter",
            &["malformed"],
        ),
    ]
}
