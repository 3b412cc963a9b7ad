#!/usr/bin/env bash
# Coverage-guided fuzzing (cargo fuzz, libFuzzer with AddressSanitizer) of the parsers a user
# can reach: boxes, time selectors, CF time units with every calendar, the service's TOML
# configuration, and the box routes' query strings through the whole service.
#
# For each target: its kept regression inputs (fuzz/regressions/TARGET) run once, then it is
# fuzzed for SECONDS (default 12) from its seed corpus (fuzz/corpus/TARGET, read only; new
# inputs go to a scratch folder). A crash fails the run and its input is copied into
# fuzz/regressions/TARGET, to be committed as a regression case.
#
#   tests/fuzz/run.sh [SECONDS]
set -euo pipefail
root="$(cd "$(dirname "$0")/../.." && pwd)"
seconds="${1:-12}"
cd "$root/fuzz"
if ! command -v cargo-fuzz >/dev/null 2>&1; then
    echo "shearbox: installing cargo-fuzz" >&2
    cargo install cargo-fuzz --locked --version 0.13.2 2>&1 | tail -1
fi
# cargo fuzz passes the sanitizer flags of nightly Rust; the one stable toolchain accepts them
# with RUSTC_BOOTSTRAP.
export RUSTC_BOOTSTRAP=1
cargo fuzz build -O 2>&1 | tail -1
failed=()
scratch="$(mktemp -d)"
trap 'rm -rf "$scratch"' EXIT
for target in bbox time_selector time_units config query; do
    if [ -d "regressions/$target" ] && [ -n "$(ls -A "regressions/$target")" ]; then
        if ! cargo fuzz run -O "$target" "regressions/$target" -- -runs=0 >"$scratch/$target.log" 2>&1; then
            tail -30 "$scratch/$target.log" >&2
            failed+=("$target (a kept regression input)")
            continue
        fi
    fi
    mkdir -p "$scratch/$target"
    if cargo fuzz run -O "$target" "$scratch/$target" "corpus/$target" -- \
        -max_total_time="$seconds" -timeout=10 -rss_limit_mb=2048 >"$scratch/$target.log" 2>&1; then
        runs="$(grep -o 'stat::number_of_executed_units: [0-9]*' "$scratch/$target.log" | grep -o '[0-9]*$' || true)"
        [ -n "$runs" ] || runs="$(grep -oE '^#[0-9]+' "$scratch/$target.log" | tail -1 | tr -d '#')"
        echo "fuzz $target: ${runs:-?} inputs in ${seconds} s, no crash"
    else
        tail -40 "$scratch/$target.log" >&2
        mkdir -p "regressions/$target"
        cp artifacts/"$target"/* "regressions/$target/" 2>/dev/null || true
        failed+=("$target")
    fi
done
if [ ${#failed[@]} -gt 0 ]; then
    echo "fuzzing found crashes in: ${failed[*]}; inputs kept in fuzz/regressions/" >&2
    exit 1
fi
