#!/usr/bin/env bash
# Mixed load (not part of CI), one run on loopback against the release `dispar demo`:
# first the bare-handler ceiling (`/livez`, the same wrk settings), then SECONDS of
# plants and dashboards together (tools/bench/mixed.lua: plant PUTs, CSV batches,
# report polls with and without If-None-Match, report page views). Prints throughput,
# p50/p99, answers by class (0 errors expected; 429s would be intended, the demo runs
# without a rate limit), and the server's peak RSS. Needs Debian's wrk.
#
#   tools/bench/load.sh [SECONDS] [CONNECTIONS]     (defaults 60 32)
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds=${1:-60}
connections=${2:-32}
. tools/bench/demo_server.sh
export ETAG PAGE_COOKIE
ETAG=$(curl -sS -o /dev/null -D - "$base/v1/reports?period=2026-W16&level=site" \
    -H "Authorization: Bearer $READ_KEY" | tr -d '\r' | sed -n 's/^[Ee][Tt][Aa][Gg]: //p')
PAGE_COOKIE=$(curl -sS -o /dev/null -D - -X POST "$base/sign-in" -H "Origin: $base" \
    --data-urlencode "key=$READ_KEY" | tr -d '\r' | sed -n 's/^[Ss]et-[Cc]ookie: \([^;]*\).*/\1/p' | head -n 1)
echo "== $(nproc) cores, load average $(cut -d' ' -f1-3 /proc/loadavg); wrk 2 threads, $connections connections"
echo "== ceiling: GET /livez for ${seconds}s"
wrk -t2 -c"$connections" -d"${seconds}s" --latency "$base/livez" | grep -E 'Requests/sec|^ +(50|99)%'
echo "== mixed: plants and dashboards for ${seconds}s"
wrk -t2 -c"$connections" -d"${seconds}s" -s tools/bench/mixed.lua "$base"
echo "peak RSS of the server: $(awk '/VmHWM/ {print $2, $3}' /proc/$pid/status)"
