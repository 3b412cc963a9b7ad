#!/usr/bin/env bash
# Load and soak: wrk at 256 connections on a mix of profile, layer and gridded layer requests
# (soak.lua) against `shearbox serve` on the demo dataset, with a 64 MiB cache. Passes when
#   - every answer is a 200 or a 503 with Retry-After (back-pressure), and wrk saw no socket
#     error and no timeout;
#   - the server's resident memory, sampled every 0.2 s and its peak (VmHWM) at the end, stays
#     under the cache bound plus $SHEARBOX_SOAK_MARGIN_MB (default 224: about 30 MiB at start;
#     the netCDF library's own chunk cache, up to the file's 67 MB decoded; 256 connections;
#     the two box queries in flight and their answers; with cache_mb = 0 the same load levels
#     off at about 140 MiB; runs with the cache peaked at 219 to 235 MiB reading boxes, and at
#     248 to 255 MiB since time steps are read whole for the cache, with the allocator held
#     to one arena per core: 307 MiB without that, see server/src/memory.rs);
#   - afterwards /healthz and /readyz answer 200, no query is in flight, the connections are
#     closed, and SIGTERM stops the service cleanly.
#
#   tests/service/soak.sh target/release/shearbox target/release/shearbox-fixtures
#   SHEARBOX_SOAK_SECONDS=600 tests/service/soak.sh ...   (longer; default 60)
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$(cd "$here/../.." && pwd)"
bin="$(realpath "${1:?usage: soak.sh PATH/TO/shearbox PATH/TO/shearbox-fixtures}")"
fixtures_bin="$(realpath "${2:?usage: soak.sh PATH/TO/shearbox PATH/TO/shearbox-fixtures}")"
seconds="${SHEARBOX_SOAK_SECONDS:-60}"
connections="${SHEARBOX_SOAK_CONNECTIONS:-256}"
cache_mb=64
margin_mb="${SHEARBOX_SOAK_MARGIN_MB:-224}"
work="$root/target/service/soak"
data="$root/target/service/data"
mkdir -p "$work" "$data"
rm -f "$work"/*
. "$here/lib.sh"
trap 'stop_server || true' EXIT

# The demo dataset, made by the fixture generator (deterministic) once and reused.
[ -f "$data/kestrel_gap.nc" ] || "$fixtures_bin" demo "$data" >/dev/null
# Two box queries at once whatever the machine, so that the bound does not depend on it.
cat >"$work/serve.toml" <<TOML
cache_mb = $cache_mb
[limits]
max_concurrent = 2
max_queue = 64
request_timeout_secs = 30
[datasets]
demo = "$data/kestrel_gap.nc"
TOML
start_server "$work/serve.toml"
rss_kib() { awk -v k="$1" '$1 == k":" { print $2 }' "/proc/$server_pid/status"; }
start_rss=$(rss_kib VmRSS)

# Sample the resident memory while wrk runs.
(
    peak=0
    while kill -0 "$server_pid" 2>/dev/null; do
        now=$(awk '$1 == "VmRSS:" { print $2 }' "/proc/$server_pid/status" 2>/dev/null || echo 0)
        [ "${now:-0}" -gt "$peak" ] && peak=$now && echo "$peak" >"$work/rss-peak"
        sleep 0.2
    done
) &
sampler=$!

wrk -t2 -c"$connections" -d"${seconds}s" --timeout 30s --latency \
    -s "$here/soak.lua" "$base" >"$work/wrk.txt" 2>&1 || { cat "$work/wrk.txt"; exit 1; }
hwm=$(rss_kib VmHWM)
kill "$sampler" 2>/dev/null || true
wait "$sampler" 2>/dev/null || true
sampled=$(cat "$work/rss-peak" 2>/dev/null || echo 0)

failed=0
fail() { echo "soak: FAILED: $*" >&2; failed=1; }
grep -E '^soak-' "$work/wrk.txt"
read -r _ connect read write status timeout < <(grep '^soak-errors' "$work/wrk.txt")
[ "$connect$read$write$timeout" = "0000" ] ||
    fail "socket errors: connect $connect, read $read, write $write, timeout $timeout"
others=$(awk '$1 == "soak-status" && $2 != 200 && $2 != 503 { n += $3 } END { print n + 0 }' "$work/wrk.txt")
[ "$others" -eq 0 ] || fail "$others answers neither 200 nor 503"
ok=$(awk '$1 == "soak-status" && $2 == 200 { print $3 }' "$work/wrk.txt")
[ "${ok:-0}" -gt 0 ] || fail "no request was answered 200"
missing=$(awk '$1 == "soak-missing-retry-after" { print $2 }' "$work/wrk.txt")
[ "$missing" -eq 0 ] || fail "$missing answers 503 without Retry-After"

bound_kib=$(( (cache_mb + margin_mb) * 1024 ))
echo "soak: resident memory at start $((start_rss / 1024)) MiB, sampled peak $((sampled / 1024)) MiB, VmHWM $((hwm / 1024)) MiB; bound ${cache_mb} MiB cache + ${margin_mb} MiB margin"
[ "$hwm" -le "$bound_kib" ] || fail "peak resident memory $((hwm / 1024)) MiB over $((bound_kib / 1024)) MiB"

health=$(curl -sS -o "$work/healthz.json" -w '%{http_code}' "$base/healthz")
[ "$health" = 200 ] && grep -q '"status":"ok"' "$work/healthz.json" || fail "/healthz answered $health"
[ "$(curl -sS -o /dev/null -w '%{http_code}' "$base/readyz")" = 200 ] || fail "/readyz is not 200"
metric() { curl -sS "$base/metrics" | awk -v m="$1" '$1 == m { print $2 }'; }
for _ in $(seq 1 50); do
    [ "$(metric shearbox_connections_open)" = 1 ] && break
    sleep 0.1
done
[ "$(metric shearbox_work_in_flight)" = 0 ] || fail "box queries still in flight after the run"
[ "$(metric shearbox_connections_open)" = 1 ] ||
    fail "$(metric shearbox_connections_open) connections open after the run (want 1: this one)"
echo "soak: rejected (503) $(metric shearbox_rejected_total), cache $(metric shearbox_cache_bytes) of $(metric shearbox_cache_capacity_bytes) bytes"
stop_server || fail "the service did not stop cleanly after SIGTERM"
grep -q 'SIGTERM received' "$work/serve.log" || fail "no SIGTERM line in the log"
exit "$failed"
