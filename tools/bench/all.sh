#!/usr/bin/env bash
# Every benchmark of BENCHMARKS.md, each with its same-run baseline, in one run (not part
# of CI; about 20 minutes on the 2-core machine). Prints each section's output and, at
# the end, the ratios the sections are judged by.
#
#   tools/bench/all.sh PYTHON
#
# PYTHON: a virtual environment with tools/reference/requirements.txt installed
# (python3 -m venv /tmp/ref && /tmp/ref/bin/pip install -r tools/reference/requirements.txt).
# Needs Debian's sqlite3 and wrk (apt-get install -y sqlite3 wrk).
set -euo pipefail
cd "$(dirname "$0")/../.."
python="${1:?the Python of a venv with tools/reference/requirements.txt}"
out=$(mktemp -d)
trap 'rm -rf "$out"' EXIT
section() { printf '\n######## %s (%s)\n' "$1" "$(date -u +%H:%M:%S)"; }

section "1. statistics engine beside scipy / statsmodels"
bash tools/bench/stats_vs_python.sh "$python" | tee "$out/stats"

section "2. batch ingest over HTTP beside the sqlite3 ceiling"
bash tools/bench/ingest.sh 200000 5000 1 | tee "$out/ingest"

section "3. report latency beside a scipy / statsmodels script; baselines beside baseline=off"
cargo run --release -q -p dispar-system-tests --example report_bench -- \
    --out "$out/rbench" --python "$python" 2>/dev/null | tee "$out/report"

section "4. the cost of a poll beside /livez"
bash tools/bench/poll.sh 10 32 | tee "$out/poll"

section "5. mixed load beside /livez"
bash tools/bench/load.sh 60 32 | tee "$out/load"

section "ratios"
http=$(sed -n 's/^ingest over HTTP:.* = \([0-9]*\) records\/s.*/\1/p' "$out/ingest" | head -n 1)
ceiling=$(sed -n 's/^sqlite3 .* = \([0-9]*\) records\/s.*/\1/p' "$out/ingest" | tail -n 1)
[ -n "$http" ] && [ -n "$ceiling" ] && awk -v a="$http" -v b="$ceiling" 'BEGIN {printf "ingest: %.2f of the sqlite3 ceiling (target >= 0.5)\n", a / b}'
grep -E '^Baselines cost|^dispar cache miss' "$out/report" || true
livez=$(awk '/^\/livez/ {print $3}' "$out/poll")
poll=$(awk '/^report 304/ {print $4}' "$out/poll")
[ -n "$livez" ] && [ -n "$poll" ] && awk -v a="$poll" -v b="$livez" 'BEGIN {printf "304 poll: %.0f req/s, %.2f of /livez (target >= 15,000 req/s)\n", a, a / b}'
