//! The picture routes through `oneshot`: status, content type, tags, well-formed SVG (parsed
//! with roxmltree, an XML 1.0 parser), and the elements of the DOM contract counted against
//! the JSON routes for the same request: the profile document for the hodograph's points and
//! segments, the gridded layer (`/layer?grid=true`) for the map's arrows.

use axum::Router;
use axum::body::Body;
use axum::http::{Request, StatusCode, header};
use roxmltree::{Document, Node};
use serde_json::Value;
use shearbox_server::app::{app, openapi};
use shearbox_server::state::AppState;
mod common;

use common::{Answer, config, get, send};

fn service(extra: &str) -> Router {
    app(AppState::new(config(extra)))
}

/// A picture: 200, `image/svg+xml`, tagged, well-formed, with the caution.
fn svg(answer: &Answer) -> Document<'_> {
    assert_eq!(answer.status, StatusCode::OK, "{}", String::from_utf8_lossy(&answer.body));
    assert_eq!(answer.headers[header::CONTENT_TYPE], "image/svg+xml");
    assert!(answer.headers.contains_key(header::ETAG));
    let doc = Document::parse(answer.text()).expect("well-formed XML (XML 1.0)");
    let root = doc.root_element();
    assert!(root.has_tag_name("svg"));
    assert!(root.attribute("viewBox").is_some());
    let caution: Vec<String> = with_class(&doc, "text", "caution").iter().map(text).collect();
    assert_eq!(caution, [shearbox_server::CAUTION]);
    doc
}

fn with_class<'a, 'i>(doc: &'a Document<'i>, tag: &str, class: &str) -> Vec<Node<'a, 'i>> {
    doc.descendants()
        .filter(|n| n.has_tag_name(tag) && n.attribute("class") == Some(class))
        .collect()
}

fn text(n: &Node<'_, '_>) -> String {
    n.text().unwrap_or("").trim().to_string()
}

fn num(n: &Node<'_, '_>, name: &str) -> f64 {
    n.attribute(name).and_then(|v| v.parse().ok()).unwrap_or_else(|| panic!("{name} on {n:?}"))
}

#[tokio::test]
async fn hodograph_matches_the_profile_document() {
    let router = service("");
    for (bbox, time) in [("-10,40,10,55", "2026-01-14T06:00Z"), ("-40,20,30,70", "latest")] {
        let q = format!("bbox={bbox}&time={time}");
        let picture = get(&router, &format!("/v1/datasets/tidy/hodograph.svg?{q}")).await;
        let doc = svg(&picture);
        let profile = get(&router, &format!("/v1/datasets/tidy/profile?{q}")).await.json();
        let levels = profile["levels"].as_array().unwrap();
        let with_wind: Vec<f64> = levels
            .iter()
            .filter(|l| !l["geostrophic_wind"].is_null())
            .map(|l| l["pressure_hpa"].as_f64().unwrap())
            .collect();
        let points: Vec<f64> = with_class(&doc, "circle", "level")
            .iter()
            .map(|n| num(n, "data-pressure-hpa"))
            .collect();
        assert_eq!(points, with_wind);
        assert_eq!(with_class(&doc, "text", "level-label").len(), points.len());
        // A segment per layer whose two levels have a wind, classed by the sign of the
        // profile's advection (neutral below 0.1 K per day, unknown when null).
        let has_wind = |p: f64| with_wind.contains(&p);
        let want: Vec<(f64, f64, &str)> = profile["layers"]
            .as_array()
            .unwrap()
            .iter()
            .map(|l| {
                let (b, t) = (l["bottom_hpa"].as_f64().unwrap(), l["top_hpa"].as_f64().unwrap());
                let class = match l["thermal_advection_k_per_day"].as_f64() {
                    None => "unknown",
                    Some(a) if a.abs() < 0.1 => "neutral",
                    Some(a) if a > 0.0 => "warm",
                    Some(_) => "cold",
                };
                (b, t, class)
            })
            .filter(|&(b, t, _)| has_wind(b) && has_wind(t))
            .collect();
        let got: Vec<(f64, f64, String)> = with_class(&doc, "line", "layer-segment")
            .iter()
            .map(|s| {
                let class = s.attribute("data-advection").unwrap().to_string();
                (num(s, "data-bottom-hpa"), num(s, "data-top-hpa"), class)
            })
            .collect();
        let got: Vec<(f64, f64, &str)> = got.iter().map(|(b, t, c)| (*b, *t, c.as_str())).collect();
        assert_eq!(got, want, "{bbox}");
        assert!(!want.is_empty());
        // The tidy fixture has u and v: every level with an observed mean is marked.
        let observed = doc.descendants().filter(|n| n.attribute("class") == Some("observed"));
        let with_obs = levels.iter().filter(|l| !l["wind"].is_null()).count();
        assert_eq!(observed.count(), with_obs);
        assert!(!with_class(&doc, "circle", "speed-ring").is_empty());
        assert_eq!(with_class(&doc, "g", "legend").len(), 1);
        let title = doc.root_element().children().find(|n| n.has_tag_name("title")).unwrap();
        assert!(text(&title).contains("tidy"), "{}", text(&title));
    }
}

/// The cells of `/layer?grid=true` with a thermal wind, as (lat, lon): what the map's
/// arrows must be.
fn gridded_arrows(layer: &Value) -> Vec<(f64, f64)> {
    let grid = &layer["grid"];
    let lat: Vec<f64> =
        grid["lat"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let lon: Vec<f64> =
        grid["lon"].as_array().unwrap().iter().map(|v| v.as_f64().unwrap()).collect();
    let u = grid["thermal_wind_u_ms"].as_array().unwrap();
    let mut out = Vec::new();
    for (j, row) in u.iter().enumerate() {
        for (i, value) in row.as_array().unwrap().iter().enumerate() {
            if !value.is_null() {
                out.push((lat[j], lon[i]));
            }
        }
    }
    out
}

fn map_arrows(doc: &Document<'_>) -> Vec<(f64, f64)> {
    with_class(doc, "g", "arrow").iter().map(|a| (num(a, "data-lat"), num(a, "data-lon"))).collect()
}

fn data_bbox(doc: &Document<'_>) -> Vec<f64> {
    doc.root_element()
        .attribute("data-bbox")
        .unwrap()
        .split(',')
        .map(|v| v.parse().unwrap())
        .collect()
}

#[tokio::test]
async fn map_arrows_are_the_gridded_layer_decimated() {
    let router = service("");
    let base = "bottom=1000&top=500&bbox=-20,35,15,60";
    for stride in [1, 2, 3] {
        let picture =
            get(&router, &format!("/v1/datasets/tidy/map.svg?{base}&stride={stride}")).await;
        let doc = svg(&picture);
        let layer =
            get(&router, &format!("/v1/datasets/tidy/layer?{base}&grid=true&stride={stride}"))
                .await;
        assert_eq!(map_arrows(&doc), gridded_arrows(&layer.json()), "stride {stride}");
        assert_eq!(with_class(&doc, "g", "reference-arrow").len(), 1);
        assert!(!with_class(&doc, "text", "contour-label").is_empty());
        for label in with_class(&doc, "text", "contour-label") {
            let value: f64 = text(&label).parse().unwrap();
            assert_eq!(value % 60.0, 0.0, "contour label {value}");
        }
        assert_eq!(with_class(&doc, "g", "colour-bar").len(), 1);
        let plot = doc.descendants().find(|n| n.attribute("id") == Some("plot-area")).unwrap();
        assert_eq!(plot.attribute("fill"), Some("none"));
        // The tidy grid is 2.5°: half a spacing beyond the box's outer cell centres.
        assert_eq!(data_bbox(&doc), [-21.25, 33.75, 16.25, 61.25]);
    }
}

#[tokio::test]
async fn map_defaults_to_the_whole_grid_and_crosses_the_antimeridian() {
    let router = service("");
    // The global fixture: 5° grid, poles included, longitudes 0..355, periodic.
    let whole = get(&router, "/v1/datasets/global/map.svg?bottom=850&top=300&stride=4").await;
    let doc = svg(&whole);
    assert_eq!(data_bbox(&doc), [-2.5, -90.0, 357.5, 90.0]);
    let layer = get(
        &router,
        "/v1/datasets/global/layer?bottom=850&top=300&bbox=-180,-90,180,90&grid=true&stride=4",
    )
    .await;
    let mut want = gridded_arrows(&layer.json());
    want.iter_mut().for_each(|(_, lon)| *lon = lon.rem_euclid(360.0));
    assert_eq!(map_arrows(&doc), want);
    // No arrow in the equatorial band or on a pole row, where the kernel masks the thermal
    // wind (physics.md, "What is undefined").
    assert!(map_arrows(&doc).iter().all(|&(lat, _)| lat.abs() >= 5.0 && lat.abs() < 90.0));

    let across =
        get(&router, "/v1/datasets/global/map.svg?bottom=850&top=300&bbox=170,20,-170,60").await;
    let doc = svg(&across);
    assert_eq!(data_bbox(&doc), [167.5, 17.5, 192.5, 62.5]);
    let lons: Vec<f64> = map_arrows(&doc).iter().map(|a| a.1).collect();
    assert!(lons.iter().any(|&l| l > 180.0) && lons.iter().all(|&l| l < 192.5), "{lons:?}");
}

#[tokio::test]
async fn bad_picture_requests_are_json_errors() {
    let router = service("[limits]\nmax_grid_cells = 20");
    let h = "/v1/datasets/tidy/hodograph.svg";
    let m = "/v1/datasets/tidy/map.svg";
    let cases: Vec<(String, u16, &str, &str)> = vec![
        (format!("{h}?bbox=1,2,3"), 400, "invalid_bbox", "four comma-separated numbers"),
        (h.to_string(), 400, "missing_parameter", "bbox is required"),
        (format!("{h}?bbox=100,0,120,10"), 400, "empty_box", "latitudes 20..70"),
        (format!("{h}?bbox=0,40,10,50&layer=1"), 400, "unknown_parameter", "bbox, time"),
        (format!("{h}?bbox=0,40,10,50&time=2030-01-01"), 400, "time_not_found", "3 step(s)"),
        ("/v1/datasets/nope/hodograph.svg?bbox=0,40,10,50".into(), 404, "unknown_dataset", "tidy"),
        (format!("{m}?top=500"), 400, "missing_parameter", "bottom is required"),
        (format!("{m}?bottom=1000&top=550"), 400, "level_not_found", "550"),
        (format!("{m}?bottom=500&top=1000"), 400, "invalid_layer", "500"),
        (format!("{m}?bottom=1000&top=500&stride=0"), 400, "invalid_stride", "at least 1"),
        (format!("{m}?bottom=1000&top=500&grid=true"), 400, "unknown_parameter", "stride"),
        ("/v1/datasets/nope/map.svg?bottom=1000&top=500".into(), 404, "unknown_dataset", "tidy"),
        (format!("{m}?bottom=1000&top=500&stride=1"), 413, "too_many_cells", "stride="),
    ];
    for (uri, status, code, words) in cases {
        let a = get(&router, &uri).await;
        assert_eq!(a.status.as_u16(), status, "{uri}: {}", a.text());
        assert_eq!(a.headers[header::CONTENT_TYPE], "application/json", "{uri}");
        let body = a.json();
        assert_eq!(body["error"]["code"], code, "{uri}");
        let message = body["error"]["message"].as_str().unwrap();
        assert!(message.contains(words), "{uri}: {message}");
        if status == 413 {
            // The stride offered fits the limit of 20 arrow cells on the 21 × 29 grid.
            let fits = body["error"]["stride"].as_u64().unwrap() as usize;
            assert!(21usize.div_ceil(fits) * 29usize.div_ceil(fits) <= 20);
            let ok = get(&router, &format!("{m}?bottom=1000&top=500&stride={fits}")).await;
            svg(&ok);
        }
    }
}

#[tokio::test]
async fn pictures_are_tagged_and_in_the_openapi_document() {
    let router = service("");
    let uri = "/v1/datasets/tidy/map.svg?bottom=850&top=300&bbox=-10,40,10,55";
    let first = get(&router, uri).await;
    svg(&first);
    let tag = first.headers[header::ETAG].clone();
    let again = send(
        &router,
        Request::get(uri).header(header::IF_NONE_MATCH, tag.clone()).body(Body::empty()).unwrap(),
    )
    .await;
    assert_eq!(again.status, StatusCode::NOT_MODIFIED);
    assert!(again.body.is_empty());
    // Another picture of the same box has another tag.
    let other = get(&router, "/v1/datasets/tidy/hodograph.svg?bbox=-10,40,10,55").await;
    assert_ne!(other.headers[header::ETAG], tag);

    let doc = serde_json::to_value(openapi()).unwrap();
    for path in ["/v1/datasets/{name}/hodograph.svg", "/v1/datasets/{name}/map.svg"] {
        let ok = &doc["paths"][path]["get"]["responses"]["200"]["content"];
        assert!(ok.get("image/svg+xml").is_some(), "{path}: {ok}");
        let bad = &doc["paths"][path]["get"]["responses"]["400"]["content"];
        assert!(bad.get("application/json").is_some(), "{path}: {bad}");
    }
}
