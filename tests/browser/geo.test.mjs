// The page's map geometry (server/assets/geo.js) with Node's test runner: pointer positions to
// longitudes and latitudes, and the box sent to the service, across the antimeridian too.
//
//   node --test tests/browser/
//
// The box convention checked here is GeoJSON's (RFC 7946, section 5.2: a bounding box that
// crosses the antimeridian has its west edge greater than its east edge), which the service's
// `bbox=W,S,E,N` follows.

import assert from "node:assert/strict";
import { readFileSync } from "node:fs";
import { test } from "node:test";

// The asset as the browser gets it: an ES module in a folder without a package.json.
const source = readFileSync(new URL("../../server/assets/geo.js", import.meta.url), "utf8");
const geo = await import(`data:text/javascript,${encodeURIComponent(source)}`);

/** The demo's map: 0.5° cells from 60°W to 40°E and 20°N to 80°N, half a cell outside. */
const demo = geo.geometry([-60.25, 19.75, 40.25, 80.25], [60, 30, 680, 440]);
/** A Pacific map whose extent runs through the antimeridian: 120°E to 110°W, unwrapped. */
const pacific = geo.geometry([120, -10, 250, 60], [0, 0, 1300, 700]);

function close(actual, expected, tolerance, what) {
  assert.ok(Math.abs(actual - expected) <= tolerance, `${what}: ${actual} vs ${expected}`);
}

test("a geometry needs a finite, ordered extent and a frame of some size", () => {
  assert.ok(demo && pacific);
  assert.equal(geo.geometry([10, 0, 5, 10], [0, 0, 10, 10]), null, "west east of east");
  assert.equal(geo.geometry([0, 10, 5, 0], [0, 0, 10, 10]), null, "south north of north");
  assert.equal(geo.geometry([0, 0, 5, 10], [0, 0, 0, 10]), null, "no width");
  assert.equal(geo.geometry([0, 0, 5], [0, 0, 10, 10]), null, "three numbers");
  assert.equal(geo.geometry([0, 0, NaN, 10], [0, 0, 10, 10]), null, "not finite");
});

test("the frame's corners are the extent's corners, west left and north top", () => {
  assert.deepEqual(geo.toLonLat(demo, { x: 60, y: 30 }), { lon: -60.25, lat: 80.25 });
  assert.deepEqual(geo.toLonLat(demo, { x: 740, y: 470 }), { lon: 40.25, lat: 19.75 });
  const middle = geo.toLonLat(demo, { x: 400, y: 250 });
  close(middle.lon, -10, 1e-9, "middle longitude");
  close(middle.lat, 50, 1e-9, "middle latitude");
});

test("toPoint undoes toLonLat", () => {
  for (const [x, y] of [[60, 30], [123.4, 400], [739.9, 31]]) {
    const { lon, lat } = geo.toLonLat(demo, { x, y });
    const back = geo.toPoint(demo, lon, lat);
    close(back.x, x, 1e-9, "x");
    close(back.y, y, 1e-9, "y");
  }
});

test("points are clamped to the frame and tested against it", () => {
  assert.deepEqual(geo.clampToPlot(demo, { x: 0, y: 1000 }), { x: 60, y: 470 });
  assert.ok(geo.insidePlot(demo, { x: 60, y: 470 }), "edges belong");
  assert.ok(!geo.insidePlot(demo, { x: 59.9, y: 100 }));
});

test("longitudes wrap into [-180, 180)", () => {
  assert.equal(geo.wrapLon(190), -170);
  assert.equal(geo.wrapLon(180), -180);
  assert.equal(geo.wrapLon(-180), -180);
  assert.equal(geo.wrapLon(-190), 170);
  assert.equal(geo.wrapLon(540), -180);
  assert.equal(geo.wrapLon(12.5), 12.5);
});

test("a box inside [-180, 180] is sent as dragged, to 0.01°", () => {
  assert.deepEqual(geo.requestBox(-25.1049, 46.972, 0.0649, 62.126), [-25.1, 46.97, 0.06, 62.13]);
  // No negative zero in the request.
  assert.ok(Object.is(geo.requestBox(-0.001, 10, 5, 20)[0], 0));
});

test("a box across the antimeridian is sent with west greater than east", () => {
  // RFC 7946 section 5.2: W > E across the antimeridian.
  assert.deepEqual(geo.requestBox(170, 30, 200, 50), [170, 30, -160, 50]);
  assert.deepEqual(geo.requestBox(175.5, -5, 180.5, 5), [175.5, -5, -179.5, 5]);
  // An edge on the antimeridian: east stays 180, west becomes -180.
  assert.deepEqual(geo.requestBox(170, 0, 180, 10), [170, 0, 180, 10]);
  assert.deepEqual(geo.requestBox(180, 0, 190, 10), [-180, 0, -170, 10]);
  assert.deepEqual(geo.requestBox(179.999, 0, 190, 10), [-180, 0, -170, 10]);
  // Whole circle.
  assert.deepEqual(geo.requestBox(120, 0, 480, 10), [-180, 0, 180, 10]);
});

test("a drag on the Pacific map becomes a request and draws back where it was", () => {
  const a = geo.toLonLat(pacific, { x: 500, y: 100 });
  const b = geo.toLonLat(pacific, { x: 800, y: 300 });
  const sent = geo.requestBox(a.lon, b.lat, b.lon, a.lat);
  assert.deepEqual(sent, [170, 30, -160, 50]);
  const [west, east] = geo.unwrapBox(pacific, sent);
  close(west, 170, 1e-9, "west drawn");
  close(east, 200, 1e-9, "east drawn");
});

test("a sent box unwraps to where it overlaps the map the most", () => {
  const check = (m, box, [west, east]) => {
    const [w, e] = geo.unwrapBox(m, box);
    close(w, west, 1e-9, `west of ${box}`);
    close(e, east, 1e-9, `east of ${box}`);
  };
  check(demo, [-25.1, 46.97, 0.06, 62.13], [-25.1, 0.06]);
  // Partly west of the map: stays there, not 360° east.
  check(demo, [-70, 30, -50, 40], [-70, -50]);
  // West of the antimeridian in the request, east of it on the unwrapped map.
  check(pacific, [-130, 0, -120, 10], [230, 240]);
  check(pacific, [130, 0, 140, 10], [130, 140]);
  check(pacific, [170, 20, -160, 50], [170, 200]);
});

test("a box is kept for another dataset only where it meets the grid", () => {
  // The grids of the dataset documents of the demo and of fixtures/antimeridian_360day.nc.
  const demoGrid = { lat_min: 20, lat_max: 80, lon_first: -60, lon_last: 40, periodic: false };
  const across = { lat_min: -40, lat_max: 10, lon_first: 140, lon_last: -120, periodic: false };
  const global = { lat_min: -90, lat_max: 90, lon_first: 0, lon_last: 355, periodic: true };
  assert.ok(geo.boxMeetsGrid(demoGrid, [-25, 47, 0, 62]));
  assert.ok(geo.boxMeetsGrid(demoGrid, [-70, 10, -60, 20]), "edges touch");
  assert.ok(!geo.boxMeetsGrid(demoGrid, [-25, 5, 0, 10]), "south of the grid");
  assert.ok(!geo.boxMeetsGrid(demoGrid, [170, 47, -170, 62]), "the other side of the globe");
  assert.ok(geo.boxMeetsGrid(demoGrid, [30, 47, -50, 62]), "all round but a gap inside the grid");
  assert.ok(geo.boxMeetsGrid(across, [170, -20, -160, -5]), "across the antimeridian");
  assert.ok(geo.boxMeetsGrid(across, [-130, -20, -100, -5]), "the grid's east end");
  assert.ok(geo.boxMeetsGrid(across, [100, -20, 150, -5]), "the grid's west end");
  assert.ok(!geo.boxMeetsGrid(across, [-25, -20, 0, -5]), "outside its longitudes");
  assert.ok(!geo.boxMeetsGrid(across, [-25, 47, 0, 62]), "the demo's box");
  assert.ok(geo.boxMeetsGrid(global, [-25, 47, 0, 62]), "a periodic grid, any longitude");
  assert.ok(geo.boxMeetsGrid(demoGrid, [0, 30, 360, 40]), "the whole circle");
});
