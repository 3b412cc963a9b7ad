//! The box query reads only the box and its halo: its answer must equal the whole grid's.

use std::path::{Path, PathBuf};

use shearbox_cf::{Dataset, TimeSelector, VarOverrides};
use shearbox_core::{BBox, Config, box_profile, compute};
use shearbox_server::query::{self, ProfileRequest, QueryError};
use shearbox_server::wire::ProfileDoc;

fn fixture(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../fixtures").join(name)
}

/// The profile computed from the whole grid read at once.
fn whole_grid(ds: &Dataset, req: &ProfileRequest, cfg: &Config) -> ProfileDoc {
    let t = ds.time_index(&req.time).unwrap();
    let fields = ds.read_fields(t, None).unwrap();
    let layers = match req.layer {
        Some((b, top)) => vec![ds.levels().layer(b, top).unwrap()],
        None => ds.levels().adjacent_layers(),
    };
    let diag = compute(&fields, &layers, cfg);
    let profile = box_profile(&fields, &diag, &req.bbox).unwrap();
    ProfileDoc::new("x", &ds.times()[t], &req.bbox, &profile)
}

#[test]
fn hyperslab_queries_equal_the_whole_grid() {
    let cfg = Config::default();
    let cases = [
        ("tidy_nc4.nc", "-12.5,40,2.5,55", None),
        ("packed_classic.nc", "0,45,10,55", Some((1000.0, 500.0))),
        // Across the seam of a 0..355 periodic grid, and a single cell.
        ("global_noleap.nc", "350,30,15,60", None),
        ("global_noleap.nc", "-30,-90,30,-60", Some((850.0, 300.0))),
        ("global_noleap.nc", "100,45,100,45", None),
        // Across the antimeridian of a regional grid stored split there.
        ("antimeridian_360day.nc", "170,-35,-170,-10", None),
        ("antimeridian_360day.nc", "140,-40,150,-30", None),
        ("cyclic_duplicate.nc", "-180,-80,180,80", None),
        ("permuted_julian.nc", "-30,25,-20,35", None),
        ("temperature_only.nc", "-5,40,5,50", None),
    ];
    for (file, bbox, layer) in cases {
        let ds = Dataset::open(&fixture(file), &VarOverrides::default()).unwrap();
        let req =
            ProfileRequest { bbox: BBox::parse(bbox).unwrap(), time: TimeSelector::Latest, layer };
        let got = query::profile("x", &ds, &req, &cfg).unwrap();
        let want = whole_grid(&ds, &req, &cfg);
        assert_eq!(got, want, "{file} {bbox}");
        assert!(
            got.layers.iter().any(|l| l.valid_cells > 0 || l.masked.equator > 0),
            "{file} {bbox}"
        );
    }
}

#[test]
fn query_errors_are_typed() {
    let ds = Dataset::open(&fixture("tidy_nc4.nc"), &VarOverrides::default()).unwrap();
    let cfg = Config::default();
    let req = |bbox: &str, time: TimeSelector, layer| ProfileRequest {
        bbox: BBox::parse(bbox).unwrap(),
        time,
        layer,
    };
    let empty = query::profile("x", &ds, &req("100,0,120,10", TimeSelector::Latest, None), &cfg);
    assert!(matches!(empty, Err(QueryError::Request(_))), "{empty:?}");
    let time = query::profile(
        "x",
        &ds,
        &req("0,40,10,50", TimeSelector::At("2030-01-01T00:00:00Z".into()), None),
        &cfg,
    );
    assert!(matches!(time, Err(QueryError::Data(_))), "{time:?}");
    let layer = query::profile(
        "x",
        &ds,
        &req("0,40,10,50", TimeSelector::Latest, Some((1000.0, 600.0))),
        &cfg,
    );
    let msg = layer.unwrap_err().to_string();
    assert!(msg.contains("600") && msg.contains("925"), "{msg}");
}
