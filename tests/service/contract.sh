#!/usr/bin/env bash
# Contract fuzzing of the HTTP API from its own OpenAPI document: schemathesis (pinned in
# requirements.txt) reads /openapi.json from `shearbox serve` on 127.0.0.1 and sends generated
# valid and invalid requests to every operation. Passes when no answer is a 5xx and every
# answer's status, content type, headers and body match the document.
#
#   tests/service/contract.sh target/release/shearbox
#   SHEARBOX_CONTRACT_EXAMPLES=500 SHEARBOX_CONTRACT_SECONDS=600 tests/service/contract.sh BIN
#
# Bounded: at most $SHEARBOX_CONTRACT_EXAMPLES cases per operation and phase (default 100) and
# $SHEARBOX_CONTRACT_SECONDS in all (default 45); a fixed seed makes the run repeatable.
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$(cd "$here/../.." && pwd)"
bin="$(realpath "${1:?usage: contract.sh PATH/TO/shearbox}")"
work="$root/target/service/contract"
rm -rf "$work" && mkdir -p "$work"
. "$here/lib.sh"
ensure_service_venv
trap 'stop_server || true' EXIT

# The committed fixtures; `demo` is the name the document's examples use.
cat >"$work/serve.toml" <<TOML
[limits]
max_grid_cells = 5000
request_timeout_secs = 20
[datasets]
demo = "$root/fixtures/tidy_nc4.nc"
global = "$root/fixtures/global_noleap.nc"
TOML
start_server "$work/serve.toml"

examples="${SHEARBOX_CONTRACT_EXAMPLES:-100}"
seconds="${SHEARBOX_CONTRACT_SECONDS:-45}"
start=$(date +%s)
status=0
# From the scratch folder, where schemathesis leaves its .schemathesis/ cache.
cd "$work"
"$service_py" -m schemathesis.cli run "$base/openapi.json" \
    --checks not_a_server_error,status_code_conformance,content_type_conformance,response_headers_conformance,response_schema_conformance \
    --phases examples,coverage,fuzzing \
    --mode all \
    --max-examples "$examples" \
    --max-time "$seconds" \
    --seed 20261202 \
    --generation-database none \
    --request-timeout 30 \
    --workers 2 \
    --no-color \
    --report junit --report-junit-path "$work/junit.xml" || status=$?
elapsed=$(( $(date +%s) - start ))
stop_server || { echo "contract: the service did not stop cleanly" >&2; status=1; }
requests=$(grep -c ' request ' "$work/serve.log" || true)
fivexx=$(grep -c 'status=5[0-9][0-9]' "$work/serve.log" || true)
echo "contract: $requests requests in ${elapsed}s, $fivexx answered 5xx (log: $work/serve.log)"
[ "$fivexx" -eq 0 ] || status=1
exit "$status"
