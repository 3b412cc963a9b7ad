#!/usr/bin/env bash
# The page's map geometry with Node's test runner (geo.test.mjs), then the page at `/` end to
# end in headless Chromium (Debian's chromium, driven by playwright-core, pinned in
# package-lock.json): `shearbox serve` on the demo dataset on a free loopback port, then
# page.mjs loads the page, drags a box and checks the profile table and the hodograph against
# the service's own answers. Installs chromium, Node.js and playwright-core when missing. The
# screenshots are left in target/browser/.
#
#   tests/browser/run.sh target/release/shearbox target/release/shearbox-fixtures
set -euo pipefail
here="$(cd "$(dirname "$0")" && pwd)"
root="$(cd "$here/../.." && pwd)"
bin="$(realpath "${1:?usage: run.sh PATH/TO/shearbox PATH/TO/shearbox-fixtures}")"
fixtures_bin="$(realpath "${2:?usage: run.sh PATH/TO/shearbox PATH/TO/shearbox-fixtures}")"
work="$root/target/browser"
data="$work/data"
mkdir -p "$work" "$data"
rm -f "$work"/*.png "$work"/serve.log

. "$root/scripts/lib.sh"
ensure_chromium
ensure_playwright "$here"
# The map's geometry without a browser (Node's test runner; under a second).
node --test "$here/geo.test.mjs"

. "$root/tests/service/lib.sh"
trap 'stop_server || true' EXIT

# The demo dataset (invented data), made by the fixture generator once and reused.
[ -f "$data/kestrel_gap.nc" ] || "$fixtures_bin" demo "$data" >/dev/null
# Beside it, a committed fixture whose grid runs through the antimeridian.
cat >"$work/serve.toml" <<TOML
[datasets]
demo = "$data/kestrel_gap.nc"
across = "$root/fixtures/antimeridian_360day.nc"
TOML
start_server "$work/serve.toml"

start=$(date +%s)
status=0
node "$here/page.mjs" "$base" "$work" demo across || status=$?
stop_server || { echo "browser: the service did not stop cleanly" >&2; status=1; }
fivexx=$(grep -c 'status=5[0-9][0-9]' "$work/serve.log" || true)
[ "$fivexx" -eq 0 ] || { echo "browser: $fivexx answers were 5xx (log: $work/serve.log)" >&2; status=1; }
echo "browser: $(( $(date +%s) - start ))s; screenshots: $(cd "$work" && ls -- *.png | tr "\n" " ")(in $work)"
exit "$status"
