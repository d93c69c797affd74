#!/usr/bin/env bash
# The statistics engine beside scipy/statsmodels on the same work, in one run:
# criterion benches of dispar-stats, then tools/reference/bench_compare.py.
# Usage: tools/bench/stats_vs_python.sh [PYTHON]   (PYTHON: a venv with tools/reference/requirements.txt)
set -euo pipefail
cd "$(dirname "$0")/../.."
python="${1:-python3}"
echo "== machine: $(nproc) cores, load $(cut -d' ' -f1-3 /proc/loadavg), $(date -u +%FT%TZ)"
echo "== dispar-stats (criterion)"
cargo bench -p dispar-stats --bench stats -- --warm-up-time 1 --measurement-time 3 2>&1 |
    grep -E -B1 'time:' | grep -v -e '^--$' -e 'Compiling' -e 'Finished' -e 'Running' || true
echo "== scipy/statsmodels (tools/reference/bench_compare.py)"
"$python" tools/reference/bench_compare.py
