# Sourced by poll.sh and load.sh: builds the release binary, starts `dispar demo` on a
# free loopback port (stopped and cleaned up on exit), and sets base, READ_KEY and
# INGEST_KEY from its banner, and work (a scratch directory).
command -v wrk >/dev/null || { echo "wrk not found (apt-get install -y wrk)" >&2; exit 2; }
cargo build --release -q -p dispar --bin dispar
work=$(mktemp -d)
./target/release/dispar demo --listen 127.0.0.1:0 >"$work/out" 2>"$work/log" &
pid=$!
trap 'kill -TERM $pid 2>/dev/null || true; wait $pid 2>/dev/null || true; rm -rf "$work"' EXIT
for _ in $(seq 1 600); do grep -q '^listening on' "$work/out" && break; sleep 0.1; done
base=$(sed -n 's/^listening on //p' "$work/out")
READ_KEY=$(sed -n 's/^read key: //p' "$work/out")
INGEST_KEY=$(sed -n 's/^ingest key: //p' "$work/out")
export READ_KEY INGEST_KEY
