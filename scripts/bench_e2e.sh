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
#
# The Python subscriber beside eqwatch (benches/python/lts_subscriber.py: paho-mqtt and
# Cantera, pinned in benches/python/requirements.txt) runs from a venv, .venv-bench,
# made here when missing (needs python3 with venv and network access to PyPI once).
# EQWATCH_E2E_PYTHON=/path/to/python uses another interpreter; EQWATCH_E2E_PYTHON=0
# leaves the Python subscriber out.
set -euo pipefail

cd "$(dirname "$0")/.."

if ! command -v mosquitto >/dev/null 2>&1 && [ ! -x /usr/sbin/mosquitto ]; then
    echo "mosquitto is not installed (apt-get install mosquitto)" >&2
    exit 1
fi

venv=.venv-bench
if [ -z "${EQWATCH_E2E_PYTHON+x}" ]; then
    if ! "$venv/bin/python" -c 'import cantera, paho.mqtt' >/dev/null 2>&1; then
        echo "== python venv $venv (benches/python/requirements.txt)" >&2
        if python3 -m venv "$venv" && "$venv/bin/pip" install -q -r benches/python/requirements.txt; then
            :
        else
            echo "could not make $venv; the Python subscriber is left out" >&2
            export EQWATCH_E2E_PYTHON=0
        fi
    fi
    if [ -z "${EQWATCH_E2E_PYTHON+x}" ]; then
        EQWATCH_E2E_PYTHON=$(pwd)/$venv/bin/python
        export EQWATCH_E2E_PYTHON
    fi
fi

target=${CARGO_TARGET_DIR:-target}
log_dir=$target/bench-logs
mkdir -p "$log_dir"
log=$log_dir/e2e.txt

# The daemon measured is the one a site installs (README, "Running as a service"): the
# `daemon` feature alone, without the embedded demo broker, the calculator's extras or
# Sparkplug; built in a target folder of its own so that it does not replace the full
# binary the tests use. EQWATCH_BIN measures another binary instead.
if [ -z "${EQWATCH_BIN:-}" ]; then
    echo "== cargo build --release --no-default-features --features daemon (the site's build)" >&2
    CARGO_TARGET_DIR=$target/site cargo build --release --no-default-features --features daemon
    EQWATCH_BIN=$target/site/release/eqwatch
    export EQWATCH_BIN
fi
case $EQWATCH_BIN in
    /*) ;;
    *) EQWATCH_BIN=$(pwd)/$EQWATCH_BIN; export EQWATCH_BIN ;;
esac

echo "== cargo bench --bench e2e (daemon: $EQWATCH_BIN; log: $log)" >&2
cargo bench --bench e2e 2>&1 | tee "$log" >&2

echo
cat "$target/e2e-bench.txt"
