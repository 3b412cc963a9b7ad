// The shearbox page. A person picks a dataset, a time and a layer, sees the layer map, drags
// a box on it and reads the box's profile table and hodograph. Every request goes to the
// service's public routes under /v1/, the same ones any other client uses.
//
// Each picture is fetched as SVG text and placed inline in a shadow root of its own: the drag
// needs the map's geometry in the DOM, and a shadow root keeps the picture's ids and style
// rules from meeting the page's or the other picture's.

import {
  boxMeetsGrid, clampToPlot, geometry, insidePlot, requestBox, toLonLat, toPoint, unwrapBox,
} from "/assets/geo.js";

const $ = (id) => document.getElementById(id);

/** What the page shows now. */
const state = {
  /** The dataset document of the chosen dataset. */
  doc: null,
  /** The map now shown: its root element, extent and plot frame (SVG user units). */
  map: null,
  /** The box as sent to the service, [W, S, E, N]; W > E crosses the antimeridian. */
  bbox: null,
  /** The drag in progress: its start and current points in SVG user units. */
  drag: null,
};

/** A request that failed, with the service's own message when it sent one. */
class Failure extends Error {
  constructor(message, code) {
    super(message);
    this.code = code;
  }
}

// ---- requests ------------------------------------------------------------------------

/** The request of each kind in flight; a newer request of a kind cancels the older. */
const inflight = new Map();

/**
 * GETs `url` as "json" or "text". Throws a Failure carrying the service's error message, or
 * an AbortError when a newer request of the same kind replaced this one.
 */
async function get(kind, url, as) {
  inflight.get(kind)?.abort();
  const control = new AbortController();
  inflight.set(kind, control);
  try {
    let response;
    try {
      response = await fetch(url, { signal: control.signal });
    } catch (e) {
      if (e.name === "AbortError") throw e;
      throw new Failure(`the service did not answer (${e.message})`, "no_answer");
    }
    if (!response.ok) throw await failureOf(response);
    return as === "json" ? await response.json() : await response.text();
  } finally {
    if (inflight.get(kind) === control) inflight.delete(kind);
  }
}

/** The Failure an error answer describes: the API's `{"error": {code, message}}` if given. */
async function failureOf(response) {
  const text = await response.text().catch(() => "");
  try {
    const doc = JSON.parse(text);
    if (doc && doc.error && doc.error.message) {
      return new Failure(doc.error.message, `${response.status} ${doc.error.code}`);
    }
  } catch {
    // not JSON: fall through to the status line
  }
  const detail = text.trim().slice(0, 200);
  return new Failure(
    detail || `the service answered ${response.status} ${response.statusText}`,
    String(response.status),
  );
}

const aborted = (e) => e && e.name === "AbortError";

// ---- status and errors ---------------------------------------------------------------

/** What is loading, by kind, and what failed, by kind. */
const busy = new Map();
const errors = new Map();

function setBusy(kind, label) {
  if (label) busy.set(kind, label);
  else busy.delete(kind);
  const status = $("status");
  status.textContent = [...busy.values()].join(" ");
  status.classList.toggle("busy", busy.size > 0);
}

function setError(kind, what, error) {
  if (error) errors.set(kind, { what, error });
  else errors.delete(kind);
  const box = $("error");
  box.replaceChildren();
  const shown = new Set();
  for (const { what: w, error: e } of errors.values()) {
    // Two requests refused for one reason (a box's profile and hodograph) show it once.
    const message = e.message || String(e);
    if (shown.has(message)) continue;
    shown.add(message);
    const p = document.createElement("p");
    const strong = document.createElement("strong");
    strong.textContent = `${w} failed: `;
    p.append(strong, message);
    if (e.code) {
      const code = document.createElement("span");
      code.className = "code";
      code.textContent = ` (${e.code})`;
      p.append(code);
    }
    box.append(p);
  }
  box.hidden = errors.size === 0;
}

/** Runs `task` as the request of `kind`, showing `label` while it runs and its failure. */
async function task(kind, label, what, run) {
  setBusy(kind, label);
  try {
    const value = await run();
    setError(kind, what, null);
    return value;
  } catch (e) {
    if (!aborted(e)) setError(kind, what, e);
    return undefined;
  } finally {
    if (!inflight.has(kind)) setBusy(kind, null);
  }
}

function setCaution(text) {
  const el = $("caution");
  el.textContent = text || "";
  el.hidden = !text;
}

// ---- formatting ----------------------------------------------------------------------

const MINUS = "\u2212";
const DASH = "\u2013";

function number(v, digits) {
  if (v === null || v === undefined || !Number.isFinite(v)) return null;
  const text = Math.abs(v).toFixed(digits);
  return v < 0 && Number(text) !== 0 ? MINUS + text : text;
}

function direction(v) {
  if (v === null || v === undefined || !Number.isFinite(v)) return null;
  return String(Math.round(v) % 360).padStart(3, "0");
}

const hpa = (p) => String(Number(p));

function timeLabel(iso) {
  const m = /^(\d{4,}-\d\d-\d\d)T(\d\d:\d\d)(:\d\d(\.\d+)?)?Z$/.exec(iso || "");
  if (!m) return iso || "";
  return m[3] && m[3] !== ":00" ? `${m[1]} ${m[2]}${m[3]} UTC` : `${m[1]} ${m[2]} UTC`;
}

function degrees(v, positive, negative) {
  const text = Math.abs(v).toFixed(2).replace(/\.?0+$/, "");
  return `${text}°${v < 0 ? negative : positive}`;
}

function boxLabel([w, s, e, n]) {
  return `${degrees(w, "E", "W")} to ${degrees(e, "E", "W")}, ${degrees(s, "N", "S")} to ${degrees(n, "N", "S")}`;
}

/** A table cell holding `text`, or a dash marking a value not defined over the box. */
function cell(text, className) {
  const td = document.createElement("td");
  if (text === null) {
    td.textContent = DASH;
    td.className = "undefined";
    td.title = "not defined over this box";
  } else {
    td.textContent = text;
    if (className) td.className = className;
  }
  return td;
}

// ---- dataset, time and layer ---------------------------------------------------------

function option(value, text, selected) {
  const o = document.createElement("option");
  o.value = value;
  o.textContent = text;
  o.selected = selected;
  return o;
}

/** The selection written in the address's fragment, so a link reopens the same view. */
function readHash() {
  const p = new URLSearchParams(location.hash.slice(1));
  const bbox = (p.get("bbox") || "").split(",").map(Number);
  return {
    dataset: p.get("dataset"),
    time: p.get("time"),
    bottom: p.get("bottom"),
    top: p.get("top"),
    bbox: bbox.length === 4 && bbox.every(Number.isFinite) ? bbox : null,
  };
}

function writeHash() {
  const p = new URLSearchParams();
  p.set("dataset", $("dataset").value);
  if ($("time").value) p.set("time", $("time").value);
  p.set("bottom", $("bottom").value);
  p.set("top", $("top").value);
  if (state.bbox) p.set("bbox", state.bbox.join(","));
  history.replaceState(null, "", `#${p}`);
}

async function start() {
  wire();
  const wanted = readHash();
  const list = await task("datasets", "Loading the datasets\u2026", "Listing the datasets", () =>
    get("datasets", "/v1/datasets", "json"),
  );
  if (!list) return;
  setCaution(list.caution);
  const select = $("dataset");
  const available = list.datasets.filter((d) => d.available).map((d) => d.name);
  const chosen = available.includes(wanted.dataset) ? wanted.dataset : available[0];
  for (const d of list.datasets) {
    const o = option(d.name, d.available ? d.name : `${d.name} (unavailable)`, d.name === chosen);
    o.disabled = !d.available;
    select.append(o);
  }
  if (!chosen) {
    setError("datasets", "Listing the datasets", new Failure(
      "no dataset is loaded; /readyz tells why each one is not serving", "none_available"));
    return;
  }
  select.disabled = false;
  if (wanted.bbox) setBox(wanted.bbox);
  await chooseDataset(chosen, wanted);
}

async function chooseDataset(name, wanted = {}) {
  const doc = await task("dataset", "Reading the dataset\u2026", `Reading dataset ${name}`, () =>
    get("dataset", `/v1/datasets/${encodeURIComponent(name)}`, "json"),
  );
  if (!doc) return;
  state.doc = doc;
  setCaution(doc.caution);

  const time = $("time");
  const values = doc.times.values || [];
  const latest = values[values.length - 1];
  const pick = values.includes(wanted.time) ? wanted.time : latest;
  time.replaceChildren(...values.map((t) => option(t, timeLabel(t), t === pick)));
  if (values.length === 0) time.append(option("", "the file's only step", true));
  time.disabled = values.length < 2;

  const levels = doc.levels_hpa;
  const bottom = $("bottom");
  const wantBottom = levels.find((p) => hpa(p) === wanted.bottom && p > levels[levels.length - 1]);
  const bottomPick = wantBottom ?? levels[0];
  bottom.replaceChildren(
    ...levels.slice(0, -1).map((p) => option(hpa(p), hpa(p), p === bottomPick)),
  );
  bottom.disabled = levels.length < 2;
  fillTops(wanted.top);
  $("box-submit").disabled = false;
  // A box chosen on another dataset is kept only where it meets this one's grid.
  if (state.bbox && !boxMeetsGrid(doc.grid, state.bbox)) clearBox();
  await Promise.all([loadMap(), state.bbox ? loadProfile() : null]);
}

/** The top levels above the chosen bottom; keeps `wanted` (or the current top) if it fits. */
function fillTops(wanted) {
  const levels = state.doc.levels_hpa;
  const bottom = Number($("bottom").value);
  const above = levels.filter((p) => p < bottom);
  const top = $("top");
  const keep = wanted ?? top.value;
  const fallback = above.includes(500) ? 500 : above[Math.floor((above.length - 1) / 2)];
  const pick = above.find((p) => hpa(p) === keep) ?? fallback;
  top.replaceChildren(...above.map((p) => option(hpa(p), hpa(p), p === pick)));
  top.disabled = above.length === 0;
}

function timeQuery() {
  const t = $("time").value;
  return t ? `&time=${encodeURIComponent(t)}` : "";
}

// ---- pictures ------------------------------------------------------------------------

/** The style of a picture's shadow root: the page's sheet does not reach inside. */
const pictureSheet = new CSSStyleSheet();
pictureSheet.replaceSync(`
  :host { display: block; }
  svg { display: block; width: 100%; height: auto; max-height: 75vh; }
  svg.map { touch-action: none; cursor: crosshair; }
  .selection { fill: rgba(194, 65, 12, 0.12); stroke: #c2410c; stroke-width: 2;
    stroke-dasharray: 6 3; vector-effect: non-scaling-stroke; pointer-events: none; }
`);

/** Parses SVG text into a root element ready to insert, or throws a Failure. */
function parseSvg(text, what) {
  const doc = new DOMParser().parseFromString(text, "image/svg+xml");
  const root = doc.documentElement;
  if (doc.querySelector("parsererror") || root.localName !== "svg") {
    throw new Failure(`the ${what} is not a well-formed SVG picture`, "bad_picture");
  }
  return document.importNode(root, true);
}

/** Puts `svg` into `host`'s shadow root in place of what was there. */
function showPicture(host, svg) {
  const root = host.shadowRoot ?? host.attachShadow({ mode: "open" });
  root.adoptedStyleSheets = [pictureSheet];
  root.replaceChildren(svg);
}

function clearPicture(host) {
  host.shadowRoot?.replaceChildren();
}

/** The plotted extent and plot frame the map declares, or a Failure. */
function mapGeometry(svg) {
  const extent = (svg.getAttribute("data-bbox") || "").split(",").map(Number);
  const frame = svg.querySelector("#plot-area");
  const plot = frame ? ["x", "y", "width", "height"].map((k) => Number(frame.getAttribute(k))) : [];
  const m = geometry(extent, plot);
  if (!m) throw new Failure("the map does not declare its extent and plot area", "bad_picture");
  return m;
}

async function loadMap() {
  const name = $("dataset").value;
  const bottom = $("bottom").value;
  const top = $("top").value;
  const host = $("map");
  host.setAttribute("aria-busy", "true");
  $("map-subtitle").textContent = `${bottom}${DASH}${top} hPa, ${timeLabel($("time").value) || "latest"}`;
  writeHash();
  const url = `/v1/datasets/${encodeURIComponent(name)}/map.svg?bottom=${bottom}&top=${top}${timeQuery()}`;
  const shown = await task("map", "Drawing the layer map\u2026", "Drawing the layer map", async () => {
    const svg = parseSvg(await get("map", url, "text"), "layer map");
    const frame = mapGeometry(svg);
    svg.classList.add("map");
    showPicture(host, svg);
    state.map = { svg, ...frame };
    svg.addEventListener("pointerdown", dragStart);
    svg.addEventListener("pointermove", dragMove);
    svg.addEventListener("pointerup", dragEnd);
    svg.addEventListener("pointercancel", dragCancel);
    drawBox();
    return true;
  });
  if (!inflight.has("map")) host.setAttribute("aria-busy", "false");
  if (!shown && !inflight.has("map") && errors.has("map")) {
    clearPicture(host);
    state.map = null;
  }
}

// ---- the box on the map --------------------------------------------------------------

/** A pointer event's position in the map's SVG user units. */
function userPoint(event) {
  const ctm = state.map.svg.getScreenCTM();
  if (!ctm) return null;
  const p = new DOMPoint(event.clientX, event.clientY).matrixTransform(ctm.inverse());
  return { x: p.x, y: p.y };
}

/** The rubber band: the box being dragged, or else the chosen box, clipped to the plot. */
function drawBox() {
  const m = state.map;
  if (!m) return;
  let a;
  let b;
  if (state.drag) {
    a = state.drag.start;
    b = state.drag.now;
  } else if (state.bbox) {
    const [west, east] = unwrapBox(m, state.bbox);
    a = clampToPlot(m, toPoint(m, west, state.bbox[3]));
    b = clampToPlot(m, toPoint(m, east, state.bbox[1]));
  }
  let band = m.svg.querySelector(":scope > rect.selection");
  if (!a || Math.abs(a.x - b.x) === 0 || Math.abs(a.y - b.y) === 0) {
    band?.remove();
    return;
  }
  if (!band) {
    band = document.createElementNS(m.svg.namespaceURI, "rect");
    band.setAttribute("class", "selection");
    m.svg.append(band);
  }
  band.setAttribute("x", Math.min(a.x, b.x));
  band.setAttribute("y", Math.min(a.y, b.y));
  band.setAttribute("width", Math.abs(a.x - b.x));
  band.setAttribute("height", Math.abs(a.y - b.y));
}

function dragStart(event) {
  if (event.button !== 0 || !state.map) return;
  const p = userPoint(event);
  if (!p || !insidePlot(state.map, p)) return;
  event.preventDefault();
  state.map.svg.setPointerCapture(event.pointerId);
  state.drag = { start: p, now: p, clientX: event.clientX, clientY: event.clientY };
  drawBox();
}

function dragMove(event) {
  if (!state.drag) return;
  const p = userPoint(event);
  if (!p) return;
  state.drag.now = clampToPlot(state.map, p);
  drawBox();
}

function dragEnd(event) {
  const drag = state.drag;
  if (!drag) return;
  const p = userPoint(event);
  if (p) drag.now = clampToPlot(state.map, p);
  state.drag = null;
  // A click, or a drag of a few pixels, keeps the box there was.
  if (Math.hypot(event.clientX - drag.clientX, event.clientY - drag.clientY) < 4) {
    drawBox();
    return;
  }
  const a = toLonLat(state.map, drag.start);
  const b = toLonLat(state.map, drag.now);
  setBox(requestBox(Math.min(a.lon, b.lon), Math.min(a.lat, b.lat),
    Math.max(a.lon, b.lon), Math.max(a.lat, b.lat)));
  loadProfile();
}

function dragCancel() {
  state.drag = null;
  drawBox();
}

/** Makes `bbox` the chosen box: the fields, the band and the address show it. */
function setBox(bbox) {
  state.bbox = bbox;
  const [w, s, e, n] = bbox;
  $("west").value = w;
  $("south").value = s;
  $("east").value = e;
  $("north").value = n;
  drawBox();
}

/** Forgets the chosen box and its profile. */
function clearBox() {
  state.bbox = null;
  for (const id of ["west", "south", "east", "north"]) $(id).value = "";
  for (const kind of ["profile", "hodograph"]) {
    inflight.get(kind)?.abort();
    setError(kind, "", null);
  }
  $("results").hidden = true;
  clearPicture($("hodograph"));
  drawBox();
}

function boxFromFields(event) {
  event.preventDefault();
  const [w, s, e, n] = ["west", "south", "east", "north"].map((id) => Number($(id).value));
  setBox([w, s, e, n]);
  loadProfile();
}

// ---- the profile ---------------------------------------------------------------------

async function loadProfile() {
  if (!state.bbox || !state.doc) return;
  writeHash();
  const name = encodeURIComponent($("dataset").value);
  const query = `bbox=${state.bbox.join(",")}${timeQuery()}`;
  const results = $("results");
  results.setAttribute("aria-busy", "true");
  const [doc] = await Promise.all([
    task("profile", "Computing the box profile\u2026", "Computing the box profile", async () => {
      const doc = await get("profile", `/v1/datasets/${name}/profile?${query}`, "json");
      showProfile(doc);
      return doc;
    }),
    task("hodograph", "Drawing the hodograph\u2026", "Drawing the hodograph", async () => {
      const svg = parseSvg(await get("hodograph", `/v1/datasets/${name}/hodograph.svg?${query}`, "text"), "hodograph");
      showPicture($("hodograph"), svg);
      return true;
    }),
  ]);
  if (!inflight.has("profile") && !inflight.has("hodograph")) {
    results.setAttribute("aria-busy", "false");
  }
  if (errors.has("hodograph")) clearPicture($("hodograph"));
  if (!doc && errors.has("profile")) results.hidden = true;
}

function showProfile(doc) {
  $("profile-subtitle").textContent = `${boxLabel(doc.bbox)}, ${timeLabel(doc.time)}`;
  const layers = doc.layers.map((l) => {
    const tr = document.createElement("tr");
    tr.dataset.bottomHpa = l.bottom_hpa;
    tr.dataset.topHpa = l.top_hpa;
    const th = document.createElement("th");
    th.scope = "row";
    th.textContent = `${hpa(l.bottom_hpa)}${DASH}${hpa(l.top_hpa)}`;
    const adv = l.thermal_advection_k_per_day;
    const kind = adv > 0 ? "warm" : adv < 0 ? "cold" : "";
    const advText = number(adv, 2);
    tr.append(
      th,
      cell(number(l.thickness_m, 1)),
      cell(number(l.mean_temperature_k, 1)),
      cell(number(l.thermal_wind?.speed_ms, 1)),
      cell(direction(l.thermal_wind?.direction_deg)),
      cell(advText === null ? null : kind ? `${advText} ${kind}` : advText, kind),
      cell(l.turning ?? null),
      cell(String(l.valid_cells)),
    );
    return tr;
  });
  $("layers").tBodies[0].replaceChildren(...layers);
  const levels = doc.levels.map((v) => {
    const tr = document.createElement("tr");
    tr.dataset.pressureHpa = v.pressure_hpa;
    const th = document.createElement("th");
    th.scope = "row";
    th.textContent = hpa(v.pressure_hpa);
    tr.append(
      th,
      cell(number(v.geopotential_height_m, 0)),
      cell(number(v.temperature_k, 1)),
      cell(number(v.geostrophic_wind?.speed_ms, 1)),
      cell(direction(v.geostrophic_wind?.direction_deg)),
      cell(number(v.wind?.speed_ms, 1)),
      cell(direction(v.wind?.direction_deg)),
      cell(String(v.valid_cells)),
    );
    return tr;
  });
  $("levels").tBodies[0].replaceChildren(...levels);
  const results = $("results");
  results.dataset.bbox = doc.bbox.join(",");
  results.hidden = false;
}

// ---- events --------------------------------------------------------------------------

function wire() {
  $("dataset").addEventListener("change", (e) => chooseDataset(e.target.value));
  $("time").addEventListener("change", () => {
    loadMap();
    loadProfile();
  });
  $("bottom").addEventListener("change", () => {
    fillTops();
    loadMap();
  });
  $("top").addEventListener("change", () => loadMap());
  $("box-form").addEventListener("submit", boxFromFields);
  document.addEventListener("keydown", (e) => {
    if (e.key === "Escape" && state.drag) dragCancel();
  });
}

start();
