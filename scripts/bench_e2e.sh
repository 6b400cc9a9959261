#!/usr/bin/env bash
# End-to-end speed of the daemon (benches/e2e.rs): builds the release binary, runs the
# harness against a local mosquitto on loopback, and prints its table (also kept in
# target/e2e-bench.txt). A measurement, not a pass/fail test.
#
#     bash scripts/bench_e2e.sh
#
# Needs mosquitto (Debian package `mosquitto`). EQWATCH_E2E_QUICK=1 runs a tenth of
# the messages. Keep the machine otherwise idle: the broker, the daemon and the
# harness share its CPUs.
set -euo pipefail

cd "$(dirname "$0")/.."

if ! command -v mosquitto >/dev/null 2>&1 && [ ! -x /usr/sbin/mosquitto ]; then
    echo "mosquitto is not installed (apt-get install mosquitto)" >&2
    exit 1
fi

target=${CARGO_TARGET_DIR:-target}
log_dir=$target/bench-logs
mkdir -p "$log_dir"
log=$log_dir/e2e.txt

echo "== cargo build --release" >&2
cargo build --release

echo "== cargo bench --bench e2e (log: $log)" >&2
cargo bench --bench e2e 2>&1 | tee "$log" >&2

echo
cat "$target/e2e-bench.txt"
