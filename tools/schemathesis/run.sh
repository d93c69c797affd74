#!/usr/bin/env bash
# Checks the examples of openapi.yaml against their schemas (check_examples.py), then
# runs schemathesis (property-based API tests, pinned in requirements.txt) against a
# dispar server loaded with the demo scenario, using the committed openapi.yaml.
# Exits non-zero when schemathesis finds a failure (server error, response that does
# not match the document, undocumented status or content type, invalid input
# accepted) or cannot reach the server.
#
# Usage: tools/schemathesis/run.sh [extra schemathesis run arguments...]
#
# Setup (once): python3 -m venv VENV && VENV/bin/pip install -r tools/schemathesis/requirements.txt
#
# Environment:
#   SCHEMATHESIS     the schemathesis command (default: schemathesis on PATH)
#   DISPAR_BIN       a dispar binary to test (default: `cargo build -p dispar --bin
#                    dispar`, debug profile, into CARGO_TARGET_DIR or target/)
#   ST_MAX_EXAMPLES  test cases per operation and phase (default 50)
#   ST_SEED          hypothesis seed (default 20260413), for reproducible runs
#   ST_OUT           where the JUnit report and the server log go
#                    (default: target/schemathesis)
#   PYTHON           Python with PyYAML and jsonschema (default: the one beside
#                    the schemathesis command)
#
# The server: `dispar demo --listen 127.0.0.1:0` (fresh temporary database, the demo
# scenario loaded, keys printed; the admin key is used so writes are exercised too).
# If this binary has no `dispar demo`, `dispar serve` on a temporary database with an
# admin key from `dispar keys create`, loaded from demo-data/ through the API
# (load_demo.py). Either way the server is stopped with SIGTERM at the end.

set -euo pipefail

here="$(cd "$(dirname "${BASH_SOURCE[0]}")" && pwd)"
root="$(cd "$here/../.." && pwd)"
st="${SCHEMATHESIS:-schemathesis}"
max_examples="${ST_MAX_EXAMPLES:-50}"
seed="${ST_SEED:-20260413}"
out="${ST_OUT:-$root/target/schemathesis}"

if ! command -v "$st" >/dev/null 2>&1; then
    echo "schemathesis not found ($st); install tools/schemathesis/requirements.txt in a venv and set SCHEMATHESIS" >&2
    exit 2
fi
# The Python of schemathesis' environment (it has PyYAML and jsonschema).
python="${PYTHON:-$(dirname "$(command -v "$st")")/python}"
[ -x "$python" ] || python=python3

# Every example in the document must match its schema (schemathesis sends the
# request examples but does not check the response examples).
"$python" "$here/check_examples.py" "$root/openapi.yaml"

bin="${DISPAR_BIN:-}"
if [ -z "$bin" ]; then
    echo "building dispar (debug) ..." >&2
    (cd "$root" && cargo build --quiet -p dispar --bin dispar)
    bin="${CARGO_TARGET_DIR:-$root/target}/debug/dispar"
fi

mkdir -p "$out"
work="$(mktemp -d)"
server_pid=""
cleanup() {
    if [ -n "$server_pid" ] && kill -0 "$server_pid" 2>/dev/null; then
        kill -TERM "$server_pid" 2>/dev/null || true
        for _ in $(seq 1 100); do
            kill -0 "$server_pid" 2>/dev/null || break
            sleep 0.1
        done
        kill -KILL "$server_pid" 2>/dev/null || true
        wait "$server_pid" 2>/dev/null || true
    fi
    cp "$work/server.log" "$out/server.log" 2>/dev/null || true
    rm -rf "$work"
}
trap cleanup EXIT

# Waits (up to $2 seconds) for the `listening on http://ADDR` line in file $1.
wait_listening() {
    local file="$1" limit="$2" i
    for i in $(seq 1 $((limit * 10))); do
        if grep -q '^listening on http://' "$file" 2>/dev/null; then
            sed -n 's/^listening on \(http:\/\/.*\)$/\1/p' "$file" | head -n 1
            return 0
        fi
        if ! kill -0 "$server_pid" 2>/dev/null; then
            echo "dispar exited before listening; its log:" >&2
            cat "$work/server.log" >&2
            return 1
        fi
        sleep 0.1
    done
    echo "dispar did not report its address within ${limit}s; its log:" >&2
    cat "$work/server.log" >&2
    return 1
}

if "$bin" demo --help 2>/dev/null | grep -q -- '--listen'; then
    echo "starting dispar demo ..." >&2
    "$bin" demo --listen 127.0.0.1:0 >"$work/stdout" 2>"$work/server.log" </dev/null &
    server_pid=$!
    base="$(wait_listening "$work/stdout" 600)"
    key="$(sed -n 's/^admin key: *//p' "$work/stdout" | head -n 1)"
    if [ -z "$key" ]; then
        # Without an admin key the writes are only checked for their 403 answers.
        key="$(sed -n 's/^read key: *//p' "$work/stdout" | head -n 1)"
        echo "note: dispar demo printed no admin key; using the read key" >&2
    fi
else
    echo "starting dispar serve and loading demo-data/ through the API ..." >&2
    db="sqlite:$work/dispar.db"
    "$bin" serve --listen 127.0.0.1:0 --database "$db" >"$work/stdout" 2>"$work/server.log" </dev/null &
    server_pid=$!
    base="$(wait_listening "$work/stdout" 120)"
    key="$("$bin" keys create --role admin --label schemathesis --database "$db" 2>/dev/null)"
    "$python" "$here/load_demo.py" "$base" "$key" "$root/demo-data"
fi
if [ -z "$key" ]; then
    echo "no API key to test with" >&2
    exit 2
fi
echo "server at $base; running schemathesis (max $max_examples examples per operation, seed $seed)" >&2

# Run from the temporary directory so schemathesis' own state stays out of the tree.
rc=0
(
    cd "$work"
    "$st" --no-color run "$root/openapi.yaml" \
        --url "$base" \
        --header "Authorization: Bearer $key" \
        --checks not_a_server_error,status_code_conformance,content_type_conformance,response_schema_conformance,response_headers_conformance,negative_data_rejection \
        --phases examples,coverage,fuzzing \
        --max-examples "$max_examples" \
        --seed "$seed" \
        --generation-database none \
        --request-timeout 60 \
        --report junit \
        --report-junit-path "$out/junit.xml" \
        "$@"
) || rc=$?
if [ "$rc" -ne 0 ]; then
    echo "schemathesis failed (exit $rc); server log: $out/server.log" >&2
fi
exit "$rc"
