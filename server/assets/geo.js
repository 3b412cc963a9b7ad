// The geometry of the layer map, kept apart from the page so that it can be tested without a
// browser (tests/browser/geo.test.mjs): points of the map's plot frame to longitudes and
// latitudes and back, and the box sent to the service.
//
// A map declares its plotted extent (data-bbox: west < east, longitudes unwrapped across the
// antimeridian, so east may exceed 180) and its plot frame (#plot-area, in SVG user units), with
// longitude linear in x (west on the left) and latitude linear in y (north at the top).

/**
 * A map's geometry from its declared extent [W, S, E, N] and plot frame [x, y, width, height],
 * or null when either is missing or degenerate.
 */
export function geometry(extent, frame) {
  const finite = (list) => list.length === 4 && list.every(Number.isFinite);
  if (!finite(extent) || !finite(frame)) return null;
  const [west, south, east, north] = extent;
  const [x, y, width, height] = frame;
  if (!(west < east && south < north && width > 0 && height > 0)) return null;
  return { west, south, east, north, x, y, width, height };
}

/** Longitude (unwrapped, as the extent) and latitude of a point of the plot frame. */
export function toLonLat(m, { x, y }) {
  return {
    lon: m.west + ((x - m.x) / m.width) * (m.east - m.west),
    lat: m.north - ((y - m.y) / m.height) * (m.north - m.south),
  };
}

/** The point of the plot frame at a longitude (unwrapped, as the extent) and latitude. */
export function toPoint(m, lon, lat) {
  return {
    x: m.x + ((lon - m.west) / (m.east - m.west)) * m.width,
    y: m.y + ((m.north - lat) / (m.north - m.south)) * m.height,
  };
}

/** `p` moved to the nearest point of the plot frame. */
export function clampToPlot(m, { x, y }) {
  return {
    x: Math.min(Math.max(x, m.x), m.x + m.width),
    y: Math.min(Math.max(y, m.y), m.y + m.height),
  };
}

/** Whether `p` lies in the plot frame, edges included. */
export function insidePlot(m, { x, y }) {
  return x >= m.x && x <= m.x + m.width && y >= m.y && y <= m.y + m.height;
}

/** Rounded to 0.01°, without a negative zero. */
const round2 = (v) => Math.round(v * 100) / 100 + 0;

/** Longitude in [-180, 180). */
export const wrapLon = (lon) => lon - 360 * Math.floor((lon + 180) / 360);

/**
 * The box [W, S, E, N] to send for an unwrapped box (west < east): longitudes back in
 * [-180, 180], so that a box across the antimeridian has W > E, and an east edge on the
 * antimeridian stays 180; a box 360° wide or more is the whole circle.
 */
export function requestBox(west, south, east, north) {
  if (east - west >= 360) return [-180, round2(south), 180, round2(north)];
  let w = round2(wrapLon(west));
  let e = round2(wrapLon(east));
  if (w === 180) w = -180;
  if (e === -180 && east > west) e = 180;
  return [w, round2(south), e, round2(north)];
}

/**
 * The west and east edges of a sent box [W, S, E, N] (W > E across the antimeridian), unwrapped
 * to where they overlap the map's extent the most.
 */
export function unwrapBox(m, [w, , e]) {
  const width = e - w >= 360 ? 360 : (((e - w) % 360) + 360) % 360;
  const first = m.west + ((((w - m.west) % 360) + 360) % 360);
  const overlap = (a) => Math.min(a + width, m.east) - Math.max(a, m.west);
  const west = overlap(first - 360) > overlap(first) ? first - 360 : first;
  return [west, west + width];
}

/** The eastward distance from longitude `a` to longitude `b`, in [0, 360). */
const eastward = (a, b) => (((b - a) % 360) + 360) % 360;

/**
 * Whether a sent box [W, S, E, N] and a dataset's grid share any area: `grid` as the dataset
 * document gives it (lat_min, lat_max, lon_first, lon_last, periodic), edges included.
 */
export function boxMeetsGrid(grid, [w, s, e, n]) {
  if (s > grid.lat_max || n < grid.lat_min) return false;
  if (grid.periodic || e - w >= 360) return true;
  // Two arcs of the circle meet when the start of one lies on the other.
  const box = eastward(w, e);
  const span = eastward(grid.lon_first, grid.lon_last);
  return eastward(w, grid.lon_first) <= box || eastward(grid.lon_first, w) <= span;
}
