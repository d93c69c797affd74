#!/usr/bin/env bash
# The cost of a dashboard's poll (not part of CI): requests a second for a 304 poll
# (If-None-Match with the report's ETag), a cache hit (the same report without it), and
# the bare-handler ceiling `/livez`, all in one run against the release `dispar demo`
# on loopback, with Debian's wrk (apt-get install -y wrk).
#
#   tools/bench/poll.sh [SECONDS] [CONNECTIONS]     (defaults 10 32)
set -euo pipefail
cd "$(dirname "$0")/../.."
seconds=${1:-10}
connections=${2:-32}
. tools/bench/demo_server.sh
key="$READ_KEY"
path="/v1/reports?period=2026-W16&level=site"
etag=$(curl -sS -o /dev/null -D - "$base$path" -H "Authorization: Bearer $key" | tr -d '\r' | sed -n 's/^[Ee][Tt][Aa][Gg]: //p')
echo "== $(nproc) cores, load average $(cut -d' ' -f1-3 /proc/loadavg); wrk ${seconds}s, $connections connections, 2 threads"
run() {
    local name="$1"; shift
    local out
    out=$(wrk -t2 -c"$connections" -d"${seconds}s" --latency "$@")
    printf '%-28s %10s req/s   p50 %8s   p99 %8s   non-2xx/3xx %s\n' "$name" \
        "$(printf '%s\n' "$out" | awk '/Requests\/sec/ {print $2}')" \
        "$(printf '%s\n' "$out" | awk '$1 == "50%" {print $2}')" \
        "$(printf '%s\n' "$out" | awk '$1 == "99%" {print $2}')" \
        "$(printf '%s\n' "$out" | awk '/Non-2xx or 3xx/ {print $5}' | grep . || echo 0)"
}
run "/livez (ceiling)" "$base/livez"
run "report 304 (If-None-Match)" -H "Authorization: Bearer $key" -H "If-None-Match: $etag" "$base$path"
run "report cache hit (200)" -H "Authorization: Bearer $key" "$base$path"
echo "peak RSS of the server: $(awk '/VmHWM/ {print $2, $3}' /proc/$pid/status)"
