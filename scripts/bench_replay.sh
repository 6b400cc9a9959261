#!/usr/bin/env bash
# Replay benchmark: a year of 1-minute demo history (525,600 rows, five reactors) through
# `eqwatch replay`; wall time and peak RSS of the replay process. Goal (issue 4): <= 5 s,
# <= 100 MiB. Not part of the test command (it takes a minute and ~1.6 GB of disk).
set -euo pipefail
cd "$(dirname "$0")/.."
cargo build --release --quiet --example gen_history
cargo build --release --quiet
target=${CARGO_TARGET_DIR:-target}
mkdir -p var/bench
csv=var/bench/baw1-year.csv
if [ ! -s "$csv" ]; then
    "$target/release/examples/gen_history" --out "$csv"
fi
python3 - "$csv" "$target/release/eqwatch" <<'PY'
import resource, subprocess, sys, time
csv, eqwatch = sys.argv[1], sys.argv[2]
for label, extra in [("no output", []),
                     ("results + plots", ["--out", "var/bench/results.jsonl", "--plot", "var/bench/plots"])]:
    t = time.perf_counter()
    r = subprocess.run([eqwatch, "replay", "--config", "config/demo-plant.toml",
                        "--input", csv] + extra, capture_output=True, text=True)
    dt = time.perf_counter() - t
    rss = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024
    if r.returncode != 0:
        sys.exit(r.stderr)
    print(f"{label:16s} {dt:6.2f} s   peak RSS so far {rss:6.1f} MiB   ({r.stdout.splitlines()[0]})")
PY
