#!/usr/bin/env bash
# Measures serving the published set against nginx, evaluate, and classification
# (docs/benchmarks.md records the results). Installs nginx and wrk where missing.
#   scripts/bench-publish.sh
#   CUTPOINTS_BENCH_METRICS=1000 CUTPOINTS_BENCH_SECONDS=3 scripts/bench-publish.sh
set -euo pipefail
cd "$(dirname "$0")/.."
missing=()
command -v nginx >/dev/null 2>&1 || missing+=(nginx)
command -v wrk >/dev/null 2>&1 || missing+=(wrk)
command -v curl >/dev/null 2>&1 || missing+=(curl)
if [ ${#missing[@]} -gt 0 ]; then
    sudo_or() { if [ "$(id -u)" -eq 0 ]; then "$@"; else sudo "$@"; fi; }
    sudo_or apt-get update -qq
    DEBIAN_FRONTEND=noninteractive sudo_or apt-get install -y -qq "${missing[@]}" >/dev/null
fi
cargo build --release --quiet
cargo bench --quiet --bench publish
