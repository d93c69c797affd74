#!/usr/bin/env bash
# Ingest benchmark (not part of CI): records/s of CSV batches over HTTP into SQLite,
# beside the ceiling: the sqlite3 CLI inserting the same rows, in one transaction,
# into the same schema (created by `dispar migrate`), with the store's pragmas.
#
#   tools/bench/ingest.sh [RECORDS] [BATCH] [CLIENTS]     (defaults 200000 5000 1)
#
# Needs the sqlite3 CLI (Debian: apt-get install -y sqlite3). Quiet machines give
# steadier numbers; the load average is printed with the results.
set -euo pipefail
cd "$(dirname "$0")/../.."
records=${1:-200000}
batch=${2:-5000}
clients=${3:-1}
work=$(mktemp -d)
trap 'rm -rf "$work"' EXIT

cargo build --release -q -p dispar --bin dispar
cargo build --release -q -p dispar-system-tests --example ingest_load
export DISPAR_BIN="$PWD/target/release/dispar"

echo "== load average before: $(cut -d' ' -f1-3 /proc/loadavg)"
echo "== HTTP: dispar serve (release), fresh SQLite file"
./target/release/examples/ingest_load --records "$records" --batch "$batch" --clients "$clients" \
    --sql-out "$work/rows.sql"

echo "== ceiling: sqlite3 CLI, same rows, one transaction of 1000-row INSERTs"
"$DISPAR_BIN" migrate --database "sqlite:$work/ceiling.db"
# The registry first, untimed (one small transaction).
sed -n '/^BEGIN IMMEDIATE;$/q;p' "$work/rows.sql" > "$work/registry.sql"
sed -n '/^BEGIN IMMEDIATE;$/,$p' "$work/rows.sql" > "$work/counts.sql"
sqlite3 "$work/ceiling.db" "PRAGMA journal_mode=WAL;" >/dev/null
{ echo "BEGIN;"; cat "$work/registry.sql"; echo "COMMIT;"; } | sqlite3 "$work/ceiling.db"
timings=$(sqlite3 "$work/ceiling.db" <<SQL
PRAGMA synchronous=FULL;
PRAGMA foreign_keys=ON;
PRAGMA temp_store=MEMORY;
.timer on
.read $work/counts.sql
SQL
)
seconds=$(printf '%s\n' "$timings" | awk '/Run Time/ {s += $4} END {printf "%.3f", s}')
stored=$(sqlite3 "$work/ceiling.db" "SELECT count(*) FROM counts_current;")
echo "sqlite3 $(sqlite3 --version | cut -d' ' -f1): $stored records in $seconds s (sum of .timer real) = $(awk -v n="$stored" -v s="$seconds" 'BEGIN {printf "%.0f", n / s}') records/s"
echo "== load average after: $(cut -d' ' -f1-3 /proc/loadavg)"
