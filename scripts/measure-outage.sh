#!/usr/bin/env bash
# How fast cutpoints answers while PostgreSQL is away, and how soon it recovers
# (docs/benchmarks.md records the results). On a throwaway cluster of its own (initdb as the
# postgres user when run as root), with the release build serving and four clients reading
# and writing in a loop:
#   1. a fast shutdown (pg_ctl stop -m fast) for 5 s, then a start: every answer's status and
#      time while it is down, and the time from the start until writes succeed again;
#   2. a stall (SIGSTOP of every server process) for 10 s, then SIGCONT: the same.
# Prints the count of each status and the latency (p50, p99, max) of the answers.
#   scripts/measure-outage.sh
#   CUTPOINTS_BENCH_BEFORE=849c668 scripts/measure-outage.sh   # also that commit, side by side
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
pgbin="$(ls -d /usr/lib/postgresql/*/bin | sort -V | tail -n 1)"
work="$(mktemp -d /tmp/cutpoints-outage-XXXXXX)"
chmod 755 "$work"
as_pg=()
if [ "$(id -u)" -eq 0 ]; then as_pg=(runuser -u postgres --); chown postgres:postgres "$work"; fi
server=""
cleanup() {
    [ -n "$server" ] && kill "$server" 2>/dev/null || true
    if [ -f "$work/data/postmaster.pid" ]; then
        main="$(head -n 1 "$work/data/postmaster.pid")"
        kill -CONT "$main" 2>/dev/null || true
        pkill -CONT -P "$main" 2>/dev/null || true
    fi
    "${as_pg[@]}" "$pgbin/pg_ctl" -D "$work/data" -m immediate -w stop >/dev/null 2>&1 || true
    rm -rf "$work"
}
trap cleanup EXIT
port=$(python3 -c 'import socket; s=socket.socket(); s.bind(("127.0.0.1",0)); print(s.getsockname()[1])')
"${as_pg[@]}" "$pgbin/initdb" -D "$work/data" -A trust -U postgres -E UTF8 --no-sync >/dev/null
pgctl() { "${as_pg[@]}" "$pgbin/pg_ctl" -D "$work/data" -l "$work/log" -w "$@" >/dev/null; }
pg_start() { pgctl -o "-p $port -k $work -c listen_addresses=127.0.0.1 -c fsync=off" start; }
pg_start

builds=("HEAD=$PWD/target/release/cutpoints")
if [ -n "${CUTPOINTS_BENCH_BEFORE:-}" ]; then
    rev="$CUTPOINTS_BENCH_BEFORE"
    git worktree add --detach "$work/before" "$rev" >/dev/null 2>&1
    (top="$PWD"; cd "$work/before" && CARGO_TARGET_DIR="$top/target/bench-before" cargo build --release --quiet)
    git worktree remove --force "$work/before"
    builds+=("$rev=$PWD/target/bench-before/release/cutpoints")
fi

for build in "${builds[@]}"; do
    label="${build%%=*}"
    bin="${build#*=}"
    db="cutpoints_outage_$(echo "$label" | tr -c "a-zA-Z0-9\n" _ | tr A-Z a-z)"
    psql -h 127.0.0.1 -p "$port" -U postgres -qc "CREATE DATABASE $db"
    url="postgres://postgres@127.0.0.1:$port/$db"
    $bin migrate --database-url "$url" >/dev/null
    printf 'pw-for-measuring\n' | $bin user add --username owner --role admin,owner --password-stdin --database-url "$url" >/dev/null
    printf 'pw-for-measuring\n' | $bin user add --username critic --role reviewer --password-stdin --database-url "$url" >/dev/null
    owner="$($bin token issue --username owner --scope write --database-url "$url")"
    critic="$($bin token issue --username critic --scope write --database-url "$url")"
    $bin serve --database-url "$url" --bind 127.0.0.1:18451 --signing-key "$work/key-$label" >"$work/serve-$label.log" 2>&1 &
    server=$!
    for _ in $(seq 100); do curl -sf http://127.0.0.1:18451/healthz >/dev/null && break; sleep 0.1; done
    echo "$label:"
    python3 - "$owner" "$critic" "$work" "$pgbin" "$port" "${as_pg[*]:-}" <<'PY'
import json, os, signal, subprocess, sys, threading, time, urllib.error, urllib.request
owner, critic, work, pgbin, port, as_pg = sys.argv[1:7]
base = "http://127.0.0.1:18451"
as_pg = as_pg.split() if as_pg else []

def call(method, path, token, body=None):
    req = urllib.request.Request(base + path, data=None if body is None else json.dumps(body).encode(),
                                 method=method, headers={"authorization": "Bearer " + token,
                                                         "content-type": "application/json"})
    try:
        with urllib.request.urlopen(req, timeout=120) as r:
            return r.status, json.loads(r.read() or b"null")
    except urllib.error.HTTPError as e:
        return e.code, None
    except Exception:
        return 0, None

status, _ = call("POST", "/api/v1/metrics", owner, {"key": "outage.probe", "name": "Outage probe", "owners": ["owner"]})
assert status == 201, status
status, p = call("POST", "/api/v1/metrics/outage.probe/proposals", owner, {
    "direction": "higher_is_better", "cuts": {"critical": 1, "intervene": 2, "outperform": 3, "stretch": 4},
    "rationale": "outage"})
assert status == 201, status
pid = p["id"]

def pgctl(*args):
    subprocess.run(as_pg + [f"{pgbin}/pg_ctl", "-D", f"{work}/data", "-l", f"{work}/log", "-w", *args],
                   check=True, stdout=subprocess.DEVNULL)

def server_pids():
    main = open(f"{work}/data/postmaster.pid").readline().strip()
    pids = [int(main)]
    for d in os.listdir("/proc"):
        if d.isdigit():
            try:
                stat = open(f"/proc/{d}/stat").read()
            except OSError:
                continue
            if stat.rsplit(")", 1)[1].split()[1] == main:
                pids.append(int(d))
    return pids

def run(name, break_it, mend_it, outage_seconds):
    results, stop = [], threading.Event()
    state = {"down": False}
    def worker(i):
        n = 0
        while not stop.is_set():
            n += 1
            down = state["down"]
            t = time.perf_counter()
            if n % 2:
                status, _ = call("POST", f"/api/v1/proposals/{pid}/comments", critic, {"body": "x"})
            else:
                status, _ = call("GET", f"/api/v1/proposals/{pid}", critic)
            results.append((down, status, time.perf_counter() - t))
    threads = [threading.Thread(target=worker, args=(i,)) for i in range(4)]
    for th in threads:
        th.start()
    time.sleep(1)
    state["down"] = True
    break_it()
    time.sleep(outage_seconds)
    mended = time.perf_counter()
    mend_it()
    state["down"] = False
    recovered = None
    while recovered is None:
        status, _ = call("POST", f"/api/v1/proposals/{pid}/comments", critic, {"body": "after"})
        if status == 201:
            recovered = time.perf_counter() - mended
        else:
            time.sleep(0.05)
    stop.set()
    for th in threads:
        th.join()
    during = [(s, d) for down, s, d in results if down]
    counts = {}
    for s, _ in during:
        counts[s] = counts.get(s, 0) + 1
    lat = sorted(d for _, d in during)
    q = lambda f: lat[min(len(lat) - 1, int(f * len(lat)))] * 1000 if lat else float("nan")
    print(f"  {name:<9} answers while away: {dict(sorted(counts.items()))}  "
          f"p50 {q(0.5):7.1f} ms  p99 {q(0.99):7.1f} ms  max {q(1.0):7.1f} ms; "
          f"writes succeed again {recovered:.2f} s after it is back")

run("shutdown", lambda: pgctl("-m", "fast", "stop"),
    lambda: pgctl("-o", f"-p {port} -k {work} -c listen_addresses=127.0.0.1 -c fsync=off", "start"), 5)
def stall():
    for p in server_pids():
        os.kill(p, signal.SIGSTOP)
def resume():
    for p in server_pids():
        os.kill(p, signal.SIGCONT)
run("stall", stall, resume, 10)
PY
    kill "$server"; wait "$server" 2>/dev/null || true; server=""
done
