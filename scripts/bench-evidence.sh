#!/usr/bin/env bash
# Measures statistics and backtests over a long history (docs/benchmarks.md records the
# results), then a 1,000,000-row import through the command line on SQLite.
#   scripts/bench-evidence.sh
#   CUTPOINTS_BENCH_OBSERVATIONS=100000 scripts/bench-evidence.sh
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
cargo bench --quiet --bench evidence
n="${CUTPOINTS_BENCH_OBSERVATIONS:-1000000}"
work="$(mktemp -d)"
trap 'rm -rf "$work"' EXIT
python3 - "$n" > "$work/history.csv" <<'PY'
import datetime, math, random, sys
n = int(sys.argv[1])
random.seed(7)
start = datetime.datetime(1990, 1, 1)
print("period_start,value")
for i in range(n):
    t = start + datetime.timedelta(hours=i)
    print(f"{t:%Y-%m-%dT%H:00:00Z},{80 + 8 * math.sin(i / 52) + random.uniform(-10, 10):.3f}")
PY
db="sqlite://$work/bench.db"
bin=target/release/cutpoints
$bin migrate --database-url "$db" >/dev/null
printf 'bench-password\n' | $bin user add --username bench --role admin,owner --password-stdin --database-url "$db" >/dev/null
# A metric to hold the history, through the API of a short-lived server.
$bin serve --database-url "$db" --bind 127.0.0.1:18431 --signing-key "$work/key" >/dev/null 2>&1 &
server=$!
trap 'kill $server 2>/dev/null; rm -rf "$work"' EXIT
token="$($bin token issue --username bench --scope write --database-url "$db")"
for _ in $(seq 50); do curl -sf http://127.0.0.1:18431/healthz >/dev/null && break; sleep 0.1; done
curl -sS --fail-with-body -H "authorization: Bearer $token" -H 'content-type: application/json' \
    -d '{"key":"bench.hourly","name":"Hourly bench metric","owners":["bench"]}' \
    http://127.0.0.1:18431/api/v1/metrics >/dev/null
echo "import of $n rows ($(du -h "$work/history.csv" | cut -f1)) through 'cutpoints observations import' on SQLite:"
/usr/bin/time -f "  %e s wall, %M KB max RSS" $bin observations import --quiet --metric bench.hourly \
    --database-url "$db" "$work/history.csv"
echo "GET /api/v1/metrics/bench.hourly/evidence over the $n rows (read, statistics, JSON):"
curl -s -o /dev/null -w "  %{time_total} s, %{size_download} bytes\n" -H "authorization: Bearer $token" \
    http://127.0.0.1:18431/api/v1/metrics/bench.hourly/evidence
echo "the same, second time:"
curl -s -o /dev/null -w "  %{time_total} s\n" -H "authorization: Bearer $token" \
    http://127.0.0.1:18431/api/v1/metrics/bench.hourly/evidence
