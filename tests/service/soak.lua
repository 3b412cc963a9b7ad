-- wrk script of the soak test: a mix of profile (50 %), one-layer (30 %) and gridded layer
-- (20 %) requests on the demo dataset (0.5 degrees, 20..80 N, 60 W..40 E, 8 steps), boxes and
-- times drawn from a fixed seed per thread, so that the run mixes cache hits and misses.
-- Counts answers by status and 503s that lack Retry-After; done() prints them as
-- "soak-status CODE COUNT" and "soak-errors connect read write status timeout" lines.

local times = {"2026-01-14T00:00:00Z", "2026-01-14T06:00:00Z", "2026-01-14T12:00:00Z",
  "2026-01-14T18:00:00Z", "2026-01-15T00:00:00Z", "2026-01-15T06:00:00Z",
  "2026-01-15T12:00:00Z", "2026-01-15T18:00:00Z"}
local layers = {{1000, 500}, {850, 300}, {925, 700}, {700, 400}, {500, 200}, {300, 100}}
local threads = {}
local counter = 0

function setup(thread)
  counter = counter + 1
  thread:set("id", counter)
  table.insert(threads, thread)
end

function init(args)
  math.randomseed(20261202 + id)
  statuses = {}
  missing_retry_after = 0
end

local function box()
  local w = -60 + 2 * math.random(0, 35)
  local s = 20 + 2 * math.random(0, 20)
  local dw = 4 + 2 * math.random(0, 15)
  local ds = 4 + 2 * math.random(0, 8)
  return string.format("%d,%d,%d,%d", w, s, math.min(w + dw, 40), math.min(s + ds, 80))
end

function request()
  local r = math.random()
  local t = times[math.random(1, #times)]
  local path
  if r < 0.5 then
    path = string.format("/v1/datasets/demo/profile?bbox=%s&time=%s", box(), t)
  else
    local l = layers[math.random(1, #layers)]
    path = string.format("/v1/datasets/demo/layer?bottom=%d&top=%d&bbox=%s&time=%s",
      l[1], l[2], box(), t)
    if r > 0.8 then
      path = path .. string.format("&grid=true&stride=%d", math.random(1, 4))
    end
  end
  return wrk.format("GET", path)
end

function response(status, headers, body)
  statuses[status] = (statuses[status] or 0) + 1
  if status == 503 and headers["Retry-After"] == nil and headers["retry-after"] == nil then
    missing_retry_after = missing_retry_after + 1
  end
end

function done(summary, latency, requests)
  local total = {}
  local missing = 0
  for _, thread in ipairs(threads) do
    local s = thread:get("statuses")
    for code, n in pairs(s) do
      total[code] = (total[code] or 0) + n
    end
    missing = missing + thread:get("missing_retry_after")
  end
  for code, n in pairs(total) do
    io.write(string.format("soak-status %d %d\n", code, n))
  end
  io.write(string.format("soak-missing-retry-after %d\n", missing))
  local e = summary.errors
  io.write(string.format("soak-errors %d %d %d %d %d\n", e.connect, e.read, e.write, e.status,
    e.timeout))
  io.write(string.format("soak-requests %d\n", summary.requests))
  io.write(string.format("soak-latency-ms p50 %.1f p99 %.1f max %.1f\n",
    latency:percentile(50) / 1000, latency:percentile(99) / 1000, latency.max / 1000))
end
