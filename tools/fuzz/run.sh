#!/usr/bin/env bash
# Runs every fuzz target in fuzz/ for SECONDS each (default 30) on the stable toolchain
# (no sanitizer), from the seeds in fuzz/seeds/ and a scratch corpus. Exits non-zero on
# the first crash (libFuzzer saves the input under fuzz/artifacts/).
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds="${1:-30}"
version=0.13.2
if [ "$(cargo fuzz --version 2>/dev/null || true)" != "cargo-fuzz $version" ]; then
    cargo install --locked --quiet cargo-fuzz --version "$version"
fi
cargo fuzz build --sanitizer none -O
corpus="$(mktemp -d)"
trap 'rm -rf "$corpus"' EXIT
for target in $(cargo fuzz list); do
    mkdir -p "$corpus/$target"
    echo "fuzzing $target for ${seconds}s"
    rc=0
    cargo fuzz run "$target" --sanitizer none -O "$corpus/$target" "fuzz/seeds/$target" \
        -- -max_total_time="$seconds" -print_final_stats=1 >"$corpus/$target.log" 2>&1 || rc=$?
    grep -E '^(Done|stat::number_of_executed_units)' "$corpus/$target.log" || true
    if [ "$rc" -ne 0 ]; then
        tail -n 60 "$corpus/$target.log"
        echo "fuzz target $target failed (exit $rc); the input is under fuzz/artifacts/$target/" >&2
        exit "$rc"
    fi
done
