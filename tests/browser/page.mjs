// The page at `/` in headless Chromium, end to end: it loads, shows the caution and the layer
// map, a box dragged with the mouse gives a profile table and a hodograph with one row and one
// segment per layer of the profile the service answers for that box (also across the
// antimeridian, on a second dataset), and a failed request shows the service's own message.
// Saves screenshots.
//
//   node tests/browser/page.mjs BASE_URL OUT_DIR DATASET [ACROSS_DATASET]
//
// DATASET is the one the page opens with; ACROSS_DATASET, if given, has a map through the
// antimeridian, where the drag is repeated.
//
// The expected numbers come from the service's JSON routes, fetched here independently of the
// page; the drag's expected box comes from the pixel positions the mouse used and the geometry
// the map declares (data-bbox and #plot-area, the pictures' agreed DOM contract).

import { chromium } from "playwright-core";

const [base, out, dataset, across] = process.argv.slice(2);
if (!base || !out || !dataset) {
  console.error("usage: node page.mjs BASE_URL OUT_DIR DATASET [ACROSS_DATASET]");
  process.exit(2);
}

let passed = 0;
const failures = [];

/** One check: counted, and reported with what was seen when it fails. */
function check(what, ok, seen) {
  if (ok) {
    passed += 1;
  } else {
    failures.push(`${what}: ${seen}`);
    console.error(`FAIL ${what}: ${seen}`);
  }
}

async function json(path) {
  const response = await fetch(base + path);
  return { status: response.status, body: await response.json() };
}

/**
 * Drags a box on the map of `name` from one point of the plot frame to another (fractions of
 * its width and height from the top left), then checks the box the page asked for and the
 * table and hodograph it shows against the profile the service answers for that box.
 */
async function dragAndCheck(page, name, [fx0, fy0], [fx1, fy1]) {
  const plot = page.locator("#map #plot-area");
  const frame = await plot.boundingBox();
  const extent = (await page.locator("#map svg").first().getAttribute("data-bbox"))
    .split(",").map(Number);
  const from = { x: frame.x + fx0 * frame.width, y: frame.y + fy0 * frame.height };
  const to = { x: frame.x + fx1 * frame.width, y: frame.y + fy1 * frame.height };
  await page.mouse.move(from.x, from.y);
  await page.mouse.down();
  await page.mouse.move(to.x, to.y, { steps: 8 });
  const band = page.locator("#map .selection");
  check(`${name}: the rubber band follows the drag`, await band.isVisible(), "no band");
  await page.mouse.up();

  // The box the page asked for is where the mouse went, to a pixel and the 0.01° rounding.
  const box = await Promise.all(
    ["west", "south", "east", "north"].map((id) => page.locator(`#${id}`).inputValue()),
  );
  await page.locator(`#results[aria-busy=false][data-bbox="${box.join(",")}"]`).waitFor();
  const [w, s, e, n] = extent;
  const lon = (x) => w + ((x - frame.x) / frame.width) * (e - w);
  const lat = (y) => n - ((y - frame.y) / frame.height) * (n - s);
  const wrap = (v) => v - 360 * Math.floor((v + 180) / 360);
  const expected = [wrap(lon(from.x)), lat(to.y), wrap(lon(to.x)), lat(from.y)];
  const pixel = Math.max((e - w) / frame.width, (n - s) / frame.height);
  const off = box.map((v, i) => Math.abs(Number(v) - expected[i]));
  check(`${name}: the box is where the mouse went`, off.every((d) => d <= pixel + 0.01),
    `fields ${box}, expected ${expected.map((v) => v.toFixed(3))} within ${pixel.toFixed(3)}`);

  // The table and the hodograph against the profile the service answers for that box.
  const time = await page.locator("#time").inputValue();
  const profile = await json(
    `/v1/datasets/${name}/profile?bbox=${box.join(",")}&time=${encodeURIComponent(time)}`,
  );
  check(`${name}: the profile of the box answers`, profile.status === 200,
    JSON.stringify(profile.body));
  const { layers, levels } = profile.body;
  check(`${name}: the profile has layers`, layers.length > 0, layers.length);
  const rows = page.locator("#layers tbody tr");
  const rowCount = await rows.count();
  check(`${name}: one table row per layer`, rowCount === layers.length,
    `${rowCount} rows, ${layers.length} layers`);
  const levelRows = await page.locator("#levels tbody tr").count();
  check(`${name}: one table row per level`, levelRows === levels.length,
    `${levelRows} rows, ${levels.length} levels`);
  const firstRow = await rows.first().locator("th, td").allTextContents();
  const l0 = layers[0];
  check(`${name}: the first row is the bottom layer`,
    firstRow[0] === `${l0.bottom_hpa}\u2013${l0.top_hpa}`, firstRow[0]);
  check(`${name}: the first row's thickness is the profile's`,
    l0.thickness_m !== null && firstRow[1] === l0.thickness_m.toFixed(1),
    `${firstRow[1]} vs ${l0.thickness_m}`);
  const segments = await page.locator("#hodograph .layer-segment").count();
  check(`${name}: one hodograph segment per layer`, segments === layers.length,
    `${segments} segments, ${layers.length} layers`);
  const points = await page.locator("#hodograph circle.level").count();
  check(`${name}: one hodograph point per level`, points === levels.length,
    `${points} points, ${levels.length} levels`);
  return { box, time };
}

const doc = (await json(`/v1/datasets/${dataset}`)).body;

const browser = await chromium.launch({
  executablePath: process.env.SHEARBOX_CHROMIUM || "/usr/bin/chromium",
  headless: true,
});
const page = await browser.newPage({ viewport: { width: 1400, height: 1000 } });
try {
  page.setDefaultTimeout(30_000);
  const consoleErrors = [];
  const outside = [];
  page.on("console", (m) => {
    if (m.type() === "error") consoleErrors.push(m.text());
  });
  page.on("pageerror", (e) => consoleErrors.push(`uncaught: ${e.message}`));
  page.on("request", (r) => {
    if (!r.url().startsWith(`${base}/`)) outside.push(r.url());
  });

  // The dataset named in the address's fragment, as a link to a view would name it.
  await page.goto(`${base}/#dataset=${encodeURIComponent(dataset)}`);
  await page.locator("#map #plot-area").waitFor();

  // The caution, in the API's words.
  const caution = page.locator("#caution");
  check("the caution is visible", await caution.isVisible(), "hidden");
  check("the caution is the dataset document's", (await caution.textContent()) === doc.caution,
    await caution.textContent());

  // The choices offer what the dataset document lists.
  check("the dataset is chosen", (await page.locator("#dataset").inputValue()) === dataset,
    await page.locator("#dataset").inputValue());
  const times = await page.locator("#time option").count();
  check("every time is offered", times === doc.times.values.length,
    `${times} options for ${doc.times.values.length} times`);
  const latest = doc.times.values[doc.times.values.length - 1];
  check("the latest time is chosen", (await page.locator("#time").inputValue()) === latest,
    await page.locator("#time").inputValue());
  const bottoms = await page.locator("#bottom option").count();
  check("every level but the top can be a layer's bottom",
    bottoms === doc.levels_hpa.length - 1, `${bottoms} for ${doc.levels_hpa.length} levels`);

  await dragAndCheck(page, dataset, [0.35, 0.3], [0.6, 0.55]);
  await page.screenshot({ path: `${out}/page.png`, fullPage: true });

  // Another dataset, whose map runs through the antimeridian: a box dragged across it is
  // sent with west greater than east.
  let current = { name: dataset, doc };
  if (across) {
    const acrossDoc = (await json(`/v1/datasets/${across}`)).body;
    const oldExtent = await page.locator("#map svg").first().getAttribute("data-bbox");
    await page.locator("#dataset").selectOption(across);
    await page.waitForFunction((old) => {
      const svg = document.querySelector("#map").shadowRoot?.querySelector("svg");
      return svg && svg.getAttribute("data-bbox") !== old;
    }, oldExtent);
    check(`${across}: the caution is the dataset document's`,
      (await caution.textContent()) === acrossDoc.caution, await caution.textContent());
    const [w, , e] = (await page.locator("#map svg").first().getAttribute("data-bbox"))
      .split(",").map(Number);
    const at180 = (180 - w) / (e - w);
    check(`${across}: the map runs through the antimeridian`, at180 > 0.1 && at180 < 0.9,
      `extent ${w}..${e}`);
    const { box } = await dragAndCheck(page, across, [at180 - 0.1, 0.3], [at180 + 0.1, 0.6]);
    check(`${across}: the box is sent with west greater than east`,
      Number(box[0]) > Number(box[2]), box.join(","));
    await page.screenshot({ path: `${out}/page-antimeridian.png` });
    current = { name: across, doc: acrossDoc };
  }

  check("no console errors", consoleErrors.length === 0, consoleErrors.join(" | "));
  check("nothing requested from outside", outside.length === 0, outside.join(" "));

  // A box with no cells, typed with the keyboard: the service's message is shown.
  const box = await Promise.all(
    ["west", "south", "east", "north"].map((id) => page.locator(`#${id}`).inputValue()),
  );
  const time = await page.locator("#time").inputValue();
  const below = Math.max(-90, current.doc.grid.lat_min - 10);
  await page.locator("#south").fill(String(below - 5));
  await page.locator("#north").fill(String(below));
  await page.locator("#north").press("Enter");
  const error = page.locator("#error");
  await error.waitFor();
  const badBox = [box[0], below - 5, box[2], below].join(",");
  const refused = await json(
    `/v1/datasets/${current.name}/profile?bbox=${badBox}&time=${encodeURIComponent(time)}`,
  );
  const shown = await error.textContent();
  check("a box with no cells is refused", refused.status === 400, refused.status);
  check("the page shows the service's message", shown.includes(refused.body.error.message),
    `${shown} lacks ${refused.body.error.message}`);
  await page.screenshot({ path: `${out}/page-error.png` });
} catch (e) {
  // A step that timed out or threw: what the page showed then is the artefact.
  check("every step completes", false, e.message);
  await page.screenshot({ path: `${out}/page-failed.png`, fullPage: true }).catch(() => {});
} finally {
  await browser.close();
}

console.log(`browser: ${passed} passed, ${failures.length} failed`);
process.exit(failures.length === 0 ? 0 : 1);
