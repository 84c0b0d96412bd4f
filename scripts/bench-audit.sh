#!/usr/bin/env bash
# Measures verification of the event record (docs/benchmarks.md records the results).
#   scripts/bench-audit.sh                 # 1,000,000 events, SQLite and the local PostgreSQL
#   CUTPOINTS_BENCH_EVENTS=100000 scripts/bench-audit.sh
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
export CUTPOINTS_BENCH_POSTGRES_URL="${CUTPOINTS_BENCH_POSTGRES_URL:-postgres://postgres@127.0.0.1:5432/postgres}"
cargo bench --quiet --bench audit_verify
