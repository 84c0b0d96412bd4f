#!/usr/bin/env bash
# Measures answers at organisation scale: a register built through the workflow (2,000 metrics
# x 20 versions, about 300,000 events and 100,000 comments) against a copy one tenth its size,
# on SQLite and on PostgreSQL (docs/benchmarks.md records the results). Built registers are
# kept under target/scale-fixtures/ and reused; PostgreSQL runs as a cluster of the benchmark's
# own from Debian's server binaries (/usr/lib/postgresql/NN/bin), also kept there.
#   scripts/bench-scale.sh
#   CUTPOINTS_SCALE_METRICS=200 CUTPOINTS_SCALE_REQUESTS=10 scripts/bench-scale.sh   # a quick try
#   CUTPOINTS_SCALE_BACKENDS=sqlite scripts/bench-scale.sh
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet
cargo bench --quiet --bench scale
