#!/usr/bin/env bash
# Other writers during a large history upload (docs/benchmarks.md records the results): a
# `mode=replace` upload of about 61.4 MiB alone; then eight clients posting comments as fast as
# they are answered, without the upload (baseline) and during the same upload again. Prints the
# time of each phase and, where clients wrote, how many writes were refused and their latency
# (p50, p99, max), on SQLite and, when PostgreSQL answers, on PostgreSQL.
#   scripts/bench-upload-contention.sh
#   CUTPOINTS_BENCH_ROWS=500000 scripts/bench-upload-contention.sh
#   CUTPOINTS_BENCH_POSTGRES_URL=postgres://postgres@127.0.0.1:5432/postgres scripts/bench-upload-contention.sh
#   CUTPOINTS_BENCH_BEFORE=849c668 scripts/bench-upload-contention.sh   # also that commit, side by side
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
bin="$PWD/target/release/cutpoints"
rows="${CUTPOINTS_BENCH_ROWS:-2300000}"
pg_admin="${CUTPOINTS_BENCH_POSTGRES_URL:-postgres://postgres@127.0.0.1:5432/postgres}"
work="$(mktemp -d)"
server=""
cleanup() {
    [ -n "$server" ] && kill "$server" 2>/dev/null || true
    rm -rf "$work"
}
trap cleanup EXIT

python3 - "$rows" > "$work/history.csv" <<'PY'
import datetime, sys
n = int(sys.argv[1])
start = datetime.datetime(1800, 1, 1)
out = sys.stdout
out.write("period_start,value\n")
for i in range(n):
    t = start + datetime.timedelta(hours=i)
    out.write(f"{t:%Y-%m-%dT%H:00:00Z},{50 + (i * 7919) % 1000 / 20:.3f}\n")
PY
echo "upload: $rows rows, $(python3 -c "import os,sys; print(f'{os.path.getsize(sys.argv[1]) / 2**20:.1f} MiB')" "$work/history.csv")"

run() {
    local bin="$1" db="$2" port="$3"
    $bin migrate --database-url "$db" >/dev/null
    printf 'bench-password\n' | $bin user add --username owner --role admin,owner --password-stdin --database-url "$db" >/dev/null
    printf 'bench-password\n' | $bin user add --username critic --role reviewer --password-stdin --database-url "$db" >/dev/null
    $bin serve --database-url "$db" --bind "127.0.0.1:$port" --signing-key "$work/key-$port" >/dev/null 2>&1 &
    server=$!
    local owner critic
    owner="$($bin token issue --username owner --scope write --database-url "$db")"
    critic="$($bin token issue --username critic --scope write --database-url "$db")"
    for _ in $(seq 100); do curl -sf "http://127.0.0.1:$port/healthz" >/dev/null && break; sleep 0.1; done
    python3 - "http://127.0.0.1:$port" "$owner" "$critic" "$work/history.csv" "$db" <<'PY'
import json, sqlite3, statistics, subprocess, sys, threading, time, urllib.error, urllib.request
base, owner, critic, path, db = sys.argv[1:6]

def call(method, url, token, body=None, ctype="application/json"):
    data = body if isinstance(body, bytes) or body is None else json.dumps(body).encode()
    req = urllib.request.Request(base + url, data=data, method=method,
                                 headers={"authorization": "Bearer " + token, "content-type": ctype})
    try:
        with urllib.request.urlopen(req, timeout=600) as r:
            return r.status, json.loads(r.read() or b"null")
    except urllib.error.HTTPError as e:
        return e.code, json.loads(e.read() or b"null")

status, _ = call("POST", "/api/v1/metrics", owner, {"key": "bench.hourly", "name": "Hourly bench metric", "owners": ["owner"]})
assert status == 201, status
status, p = call("POST", "/api/v1/metrics/bench.hourly/proposals", owner, {
    "direction": "higher_is_better",
    "cuts": {"critical": 40, "intervene": 60, "outperform": 80, "stretch": 90},
    "rationale": "bench"})
assert status == 201, (status, p)
proposal = p["id"]
# A history in place first, so that the replace also removes one.
status, r = call("POST", "/api/v1/metrics/bench.hourly/observations?mode=replace", owner,
                 b"period_start,value\n2000-01-01,1\n", "text/csv")
assert status == 200, (status, r)

def load(stop, results):
    while not stop.is_set():
        t = time.perf_counter()
        status, _ = call("POST", f"/api/v1/proposals/{proposal}/comments", critic, {"body": "load"})
        results.append((status, time.perf_counter() - t))

def phase(name, work, writers=8):
    stop, results, threads = threading.Event(), [], []
    for _ in range(writers):
        th = threading.Thread(target=load, args=(stop, results))
        th.start()
        threads.append(th)
    started = time.perf_counter()
    outcome = work()
    elapsed = time.perf_counter() - started
    stop.set()
    for th in threads:
        th.join()
    lat = sorted(s for _, s in results)
    refused = sum(1 for status, _ in results if status != 201)
    if not lat:
        print(f"  {name:<15} {elapsed:6.1f} s")
        return outcome
    p = lambda q: lat[min(len(lat) - 1, int(q * len(lat)))] * 1000
    print(f"  {name:<15} {elapsed:6.1f} s  writes {len(results):6d}  refused {refused:4d}  "
          f"p50 {p(0.5):7.1f} ms  p99 {p(0.99):7.1f} ms  max {lat[-1] * 1000:7.1f} ms")
    return outcome

body = open(path, "rb").read()
upload = lambda: call("POST", "/api/v1/metrics/bench.hourly/observations?mode=replace", owner, body, "text/csv")
status, report = phase("upload alone", upload, writers=0)
assert status == 200, (status, report)
phase("writers alone", lambda: time.sleep(10))
status, report = phase("during upload", lambda: call(
    "POST", "/api/v1/metrics/bench.hourly/observations?mode=replace", owner, body, "text/csv"))
assert status == 200, (status, report)
print(f"  upload answered 200: {report['total']} periods stored, {report['removed']} removed")

# A small upload, then the same beside the rows of 1,000,000-row uploads that died half way
# (written straight into the database as such an upload leaves them; kept from any sweep
# during the measurement).
def sql(statement):
    if db.startswith("sqlite://"):
        c = sqlite3.connect(db[len("sqlite://"):])
        c.executescript(statement)
        c.close()
    else:
        subprocess.run(["psql", "-q", "-v", "ON_ERROR_STOP=1", db, "-c", statement], check=True)
def tables():
    if db.startswith("sqlite://"):
        c = sqlite3.connect(db[len("sqlite://"):])
        names = {r[0] for r in c.execute("SELECT name FROM sqlite_master WHERE type = 'table'")}
        c.close()
        return names
    out = subprocess.run(["psql", "-Atc", "SELECT tablename FROM pg_tables", db], check=True, capture_output=True, text=True)
    return set(out.stdout.split())
sqlite = db.startswith("sqlite://")
numbers = ("WITH RECURSIVE n(i) AS (SELECT 0 UNION ALL SELECT i + 1 FROM n WHERE i < 999999) SELECT i FROM n"
           if sqlite else "SELECT i FROM generate_series(0, 999999) AS g(i)")
period = "'1000-01-01T00:00:00.' || printf('%06d', i) || 'Z'" if sqlite else "'1000-01-01T00:00:00.' || lpad(i::text, 6, '0') || 'Z'"
if "histories" in tables():
    leftovers = (
        "INSERT INTO histories (metric_id, state, rows, touched_at) "
        "SELECT id, 'building', 0, '9999-01-01T00:00:00.000000Z' FROM metrics WHERE key = 'bench.hourly';"
        f"INSERT INTO observations (history_id, period_start, value) SELECT (SELECT MAX(id) FROM histories), {period}, 1 FROM ({numbers}) AS n;")
else:
    leftovers = (
        "INSERT INTO observation_staging (upload, period_start, value, created_at) "
        f"SELECT 'died-half-way', {period}, 1, '9999-01-01T00:00:00.000000Z' FROM ({numbers}) AS n;")
small = b"period_start,value\n2400-01-01,1\n2400-01-02,2\n"
def small_uploads():
    times = []
    for _ in range(15):
        t = time.perf_counter()
        status, r = call("POST", "/api/v1/metrics/bench.hourly/observations?mode=merge", owner, small, "text/csv")
        assert status == 200, (status, r)
        times.append(time.perf_counter() - t)
    return statistics.median(times) * 1000
def scalar(statement):
    if sqlite:
        c = sqlite3.connect(db[len("sqlite://"):])
        value = c.execute(statement).fetchone()[0]
        c.close()
        return value
    out = subprocess.run(["psql", "-Atc", statement, db], check=True, capture_output=True, text=True)
    return int(out.stdout.strip())
if "histories" in tables():
    # The histories the uploads above replaced are deleted in the background; time the small
    # uploads once that is done, so that they do not share the write lock with it.
    while scalar("SELECT COUNT(*) FROM histories WHERE state <> 'live'") > 0:
        time.sleep(0.5)
clean = small_uploads()
sql(leftovers)
if sqlite:
    # So that the comparison is of the rows left behind, not of a large write-ahead log.
    sql("PRAGMA wal_checkpoint(TRUNCATE);")
dirty = small_uploads()
print(f"  2-row upload    {clean:7.1f} ms; beside 1,000,000 rows of an upload that died: {dirty:7.1f} ms (median of 15)")
PY
    kill "$server"
    wait "$server" 2>/dev/null || true
    server=""
}

builds=("HEAD=$bin")
if [ -n "${CUTPOINTS_BENCH_BEFORE:-}" ]; then
    rev="$CUTPOINTS_BENCH_BEFORE"
    git worktree add --detach "$work/before" "$rev" >/dev/null 2>&1
    (top="$PWD"; cd "$work/before" && CARGO_TARGET_DIR="$top/target/bench-before" cargo build --release --quiet)
    git worktree remove --force "$work/before"
    builds+=("$rev=$PWD/target/bench-before/release/cutpoints")
fi
pg_up=false
psql "$pg_admin" -Atc 'SELECT 1' >/dev/null 2>&1 && pg_up=true
for build in "${builds[@]}"; do
    label="${build%%=*}"
    exe="${build#*=}"
    echo "SQLite, $label:"
    run "$exe" "sqlite://$work/bench-$label.db" 18441
    if $pg_up; then
        name="cutpoints_bench_$$"
        psql "$pg_admin" -qc "CREATE DATABASE $name"
        echo "PostgreSQL, $label:"
        run "$exe" "${pg_admin%/*}/$name" 18442
        psql "$pg_admin" -qc "DROP DATABASE $name WITH (FORCE)"
    else
        echo "PostgreSQL: not measured ($pg_admin does not answer)"
    fi
done
