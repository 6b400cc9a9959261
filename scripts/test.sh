#!/usr/bin/env bash
# The test command: installs what the tests need when it is missing, then runs
# formatting, lints, the Rust tests and the numeric cross-checks against Cantera and thermo.
set -euo pipefail
cd "$(dirname "$0")/.."

step() { printf '\n==> %s\n' "$*"; }

# Debian packages the integration tests need (the MQTT broker).
need_apt=()
command -v mosquitto >/dev/null 2>&1 || [ -x /usr/sbin/mosquitto ] || need_apt+=(mosquitto)
if [ ${#need_apt[@]} -gt 0 ]; then
  step "installing ${need_apt[*]} (apt-get)"
  if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
  $SUDO apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends "${need_apt[@]}" >/dev/null
fi

# Python reference libraries, pinned, in a venv inside the repo (ignored by git).
if ! .venv/bin/python -c 'import cantera, thermo' >/dev/null 2>&1; then
  step "creating .venv with the pinned reference libraries"
  python3 -m venv .venv
  .venv/bin/pip install -q --disable-pip-version-check -r scripts/requirements.txt
fi

step "cargo fmt --check"
cargo fmt --all -- --check

step "cargo clippy --all-targets -- -D warnings"
cargo clippy --all-targets -- -D warnings

step "numeric core without the daemon (no tokio)"
cargo build --lib --no-default-features
if cargo tree --no-default-features -e normal --prefix none | grep -qE '^(tokio|rumqttc) '; then
  echo "the numeric core pulls in tokio or rumqttc without the daemon feature" >&2
  exit 1
fi

step "cargo test"
cargo test --all-targets

step "release build for the cross-checks"
cargo build --release --bin eqwatch
bin=target/release/eqwatch

step "cross-check against Cantera"
.venv/bin/python scripts/crosscheck_cantera.py --bin "$bin"

step "cross-check against thermo (Peng-Robinson)"
.venv/bin/python scripts/crosscheck_thermo.py --bin "$bin"

step "species data are what the generator makes from the reference files"
.venv/bin/python tools/gen_species.py --check

echo
echo "all tests passed"
