#!/usr/bin/env bash
# Checks the files `shearbox compute` writes with tools from outside the project: the CF
# compliance checker (cfchecker, CF 1.8, offline against the CF tables in cf-tables/) and the
# numpy reference of this folder, cell by cell (check_compute.py says how).
#
#   tests/reference/check_compute.sh [SHEARBOX_BINARY]   (default: target/release/shearbox)
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
root="$(cd "$here/../.." && pwd)"
bin="${1:-$root/target/release/shearbox}"
. "$here/venv.sh"
"$py" "$here/check_compute.py" --shearbox "$bin" --tables "$here/cf-tables" --root "$root"
