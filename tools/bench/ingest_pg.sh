#!/usr/bin/env bash
# Ingest benchmark on PostgreSQL (not part of CI), one run: records/s of CSV batches over
# HTTP into PostgreSQL, beside the same batches into SQLite and beside the ceiling — a
# plain COPY of the same rows into one bare table (no indexes, no history, no roll-ups).
#
#   tools/bench/ingest_pg.sh [RECORDS] [BATCH] [CLIENTS]     (defaults 200000 5000 1)
#
# Uses DISPAR_TEST_POSTGRES when set, else starts a throwaway server
# (tools/postgres/throwaway.sh; Debian's postgresql package). The throwaway server runs
# with fsync off; set DISPAR_TEST_POSTGRES to a server with your production settings to
# measure durable commits.
set -euo pipefail
cd "$(dirname "$0")/../.."
records=${1:-200000}
batch=${2:-5000}
clients=${3:-1}
work=$(mktemp -d)
chmod 755 "$work"
cleanup() {
    if [ -n "${started:-}" ]; then bash tools/postgres/throwaway.sh stop "$work/pg" || true; fi
    rm -rf "$work"
}
trap cleanup EXIT
if [ -z "${DISPAR_TEST_POSTGRES:-}" ]; then
    DISPAR_TEST_POSTGRES="$(bash tools/postgres/throwaway.sh start "$work/pg" 55437)"
    started=1
fi
url="$DISPAR_TEST_POSTGRES"

cargo build --release -q -p dispar --bin dispar
cargo build --release -q -p dispar-system-tests --example ingest_load
export DISPAR_BIN="$PWD/target/release/dispar"
load=./target/release/examples/ingest_load

echo "== load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
echo "== HTTP: dispar serve (release), fresh SQLite file"
env -u DISPAR_TEST_POSTGRES "$load" --records "$records" --batch "$batch" --clients "$clients"
echo "== HTTP: dispar serve (release), fresh PostgreSQL database"
DISPAR_TEST_POSTGRES="$url" "$load" --records "$records" --batch "$batch" --clients "$clients" \
    --csv-out "$work/rows.csv"

echo "== ceiling: COPY of the same rows into one bare table, one transaction"
db="dispar_copy_$$"
psql "$url" -qAtc "CREATE DATABASE $db"
copy_url="${url%/*}/$db"
psql "$copy_url" -qAtc "CREATE TABLE bare (site text, line text, date date, inspected bigint, defective bigint, flash bigint, short_shot bigint, seal_leak bigint)"
start=$(date +%s.%N)
psql "$copy_url" -qAtc "\\copy bare FROM '$work/rows.csv' WITH (FORMAT csv)"
end=$(date +%s.%N)
stored=$(psql "$copy_url" -qAtc "SELECT count(*) FROM bare")
psql "$url" -qAtc "DROP DATABASE $db"
awk -v n="$stored" -v a="$start" -v b="$end" 'BEGIN {printf "COPY: %d rows in %.3f s = %.0f rows/s\n", n, b - a, n / (b - a)}'
echo "PostgreSQL $(psql "$url" -qAtc 'SHOW server_version')"
echo "== load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
