#!/usr/bin/env bash
# Regenerates the profile documents of tests/reference/cases.json with the numpy reference and
# compares them with the committed goldens in tests/golden. Exits non-zero when they differ.
#
#   tests/reference/check_goldens.sh                   check (also runs the reference's own tests)
#   SHEARBOX_BLESS=1 tests/reference/check_goldens.sh  rewrite tests/golden from the reference
#
# The reference runs in tests/reference/.venv (git-ignored), created on first use from the exact
# pins in requirements.txt; pip is not called at all when the pinned versions are installed.
set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
root="$(cd "$here/../.." && pwd)"
golden="$root/tests/golden"
. "$here/venv.sh"

# The reference's own checks against analytic cases come first: goldens from a broken
# reference would be worthless.
"$py" -m unittest discover -s "$here" -p 'test_*.py'

tmp="$(mktemp -d)"
trap 'rm -rf "$tmp"' EXIT
"$py" "$here/diagnostics.py" --cases "$here/cases.json" --out "$tmp" --root "$root"
count="$(find "$tmp" -name '*.json' | wc -l)"

if [ "${SHEARBOX_BLESS:-}" = "1" ]; then
    mkdir -p "$golden"
    find "$golden" -maxdepth 1 -name '*.json' -delete
    cp "$tmp"/*.json "$golden"/
    echo "wrote $count golden profile documents into tests/golden"
    exit 0
fi

if ! diff -ru "$golden" "$tmp" >"$tmp.diff" 2>&1; then
    head -n 60 "$tmp.diff" >&2
    rm -f "$tmp.diff"
    echo "goldens are stale: run SHEARBOX_BLESS=1 tests/reference/check_goldens.sh to regenerate" \
        "(and review the diff before committing)" >&2
    exit 1
fi
rm -f "$tmp.diff"
echo "goldens are current: $count profile documents match the numpy reference"
