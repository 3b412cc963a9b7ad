-- wrk script of scripts/bench-serve.
--
--   wrk ... -s load.lua URL -- fixed
--       every request is URL as given (/healthz, or one profile the cache answers);
--   wrk ... -s load.lua URL -- boxes THREADS DATASET OFFSET TIME [TIME ...]
--       every request asks for a 10 x 10 degree box (on 0.25 degree steps inside the bench
--       grid, 20-80N 60W-40E) that no earlier request of the run asked for, each wrk thread
--       taking the TIMEs in turn, so neither the answer cache nor the input cache can answer it. THREADS is wrk's
--       -t; runs given OFFSETs far enough apart (scripts/bench-serve: 9000) ask for different
--       boxes from each other too.
--
-- When the run ends it prints one line for the script to parse:
--   RESULT requests=N duration_us=N p50_us=N p99_us=N max_us=N non2xx=N errors=N

local mode, nthreads, dataset, offset = "fixed", 1, "bench", 0
local times = {}
local counter = 0
local threads = {}

function setup(thread)
   thread:set("id", #threads)
   table.insert(threads, thread)
end

function init(args)
   mode = args[1] or "fixed"
   if mode == "boxes" then
      nthreads = tonumber(args[2])
      dataset = args[3]
      offset = tonumber(args[4])
      for i = 5, #args do
         table.insert(times, args[i])
      end
   end
end

-- 201 south edges (20 to 70N) times 361 west edges (60W to 30E): 72561 boxes. Request k
-- (counted from OFFSET) takes box (k * 7919) mod 72561, a permutation (7919 is prime and does not divide
-- 72561 = 3 * 19^2 * 67), so boxes do not repeat and neighbours in time are far apart.
local SOUTHS, WESTS = 201, 361
local NBOXES = SOUTHS * WESTS

function request()
   if mode ~= "boxes" then
      return wrk.request()
   end
   local k = offset + id + nthreads * counter
   local b = (k * 7919) % NBOXES
   local south = 20 + 0.25 * (b % SOUTHS)
   local west = -60 + 0.25 * math.floor(b / SOUTHS)
   local time = times[(counter % #times) + 1]
   local path = string.format("/v1/datasets/%s/profile?bbox=%g,%g,%g,%g&time=%s",
      dataset, west, south, west + 10, south + 10, time)
   counter = counter + 1
   return wrk.format("GET", path)
end

function done(summary, latency, requests)
   local e = summary.errors
   io.write(string.format(
      "RESULT requests=%d duration_us=%d p50_us=%d p99_us=%d max_us=%d non2xx=%d errors=%d\n",
      summary.requests, summary.duration, latency:percentile(50), latency:percentile(99),
      latency.max, e.status, e.connect + e.read + e.write + e.timeout))
end
