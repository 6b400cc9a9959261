#!/usr/bin/env bash
# The test command: installs what the tests need when it is missing, then runs
# formatting, lints, the Rust tests and the numeric cross-checks against Cantera and thermo.
set -euo pipefail
cd "$(dirname "$0")/.."

step() { printf '\n==> %s\n' "$*"; }

# Debian packages the integration tests need (the MQTT broker, a browser).
need_apt=()
command -v mosquitto >/dev/null 2>&1 || [ -x /usr/sbin/mosquitto ] || need_apt+=(mosquitto)
# A real headless browser for the live page's test (tests/page).
[ -x /usr/bin/chromium ] || [ -x /usr/bin/chromium-browser ] || need_apt+=(chromium)
if [ ${#need_apt[@]} -gt 0 ]; then
  step "installing ${need_apt[*]} (apt-get)"
  if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
  $SUDO apt-get update -qq
  DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends "${need_apt[@]}" >/dev/null
fi

# systemd-analyze for the unit check (scripts/check-deploy.sh); optional: without it the
# unit is not verified, and a failed install does not stop the tests.
if ! command -v systemd-analyze >/dev/null 2>&1; then
  step "installing systemd (apt-get) for systemd-analyze"
  if [ "$(id -u)" = 0 ]; then SUDO=""; else SUDO="sudo"; fi
  { $SUDO apt-get update -qq && DEBIAN_FRONTEND=noninteractive $SUDO apt-get install -y -qq --no-install-recommends systemd >/dev/null; } \
    || echo "systemd could not be installed; the unit will not be verified"
fi

# Python reference libraries, pinned, in a venv inside the repo (ignored by git).
if ! .venv/bin/python -c 'import cantera, thermo' >/dev/null 2>&1; then
  step "creating .venv with the pinned reference libraries"
  python3 -m venv .venv
  .venv/bin/pip install -q --disable-pip-version-check -r scripts/requirements.txt
fi

step "cargo fmt --check"
cargo fmt --all -- --check

# Build output goes where cargo puts it: CARGO_TARGET_DIR when set, else ./target.
target=${CARGO_TARGET_DIR:-target}

step "cargo clippy --workspace --all-targets -- -D warnings"
cargo clippy --workspace --all-targets -- -D warnings

step "the numeric core (crates/core) builds alone, without a runtime"
cargo build -p eqwatch-core
if cargo tree -p eqwatch-core -e normal --prefix none | grep -qE '^(tokio|rumqttc|tracing|serde_json) '; then
  echo "crates/core pulls in tokio, rumqttc, tracing or serde_json; it must not" >&2
  exit 1
fi

step "feature sets build: calculator, check and replay without the daemon; the daemon without the demo broker"
cargo build --lib --no-default-features
cargo build --no-default-features --features cli --bin eqwatch
if cargo tree -p eqwatch --no-default-features --features cli -e normal --prefix none | grep -qE '^(tokio|rumqttc|rumqttd) '; then
  echo "the cli feature set (calc, check, replay) pulls in tokio or an MQTT crate; it must not" >&2
  exit 1
fi
"$target/debug/eqwatch" replay --help >/dev/null
"$target/debug/eqwatch" check --config config/demo-plant.toml >/dev/null
cargo build --no-default-features --features daemon --bin eqwatch

step "cargo test --workspace"
EQWATCH_REQUIRE_BROWSER=1 cargo test --workspace --all-targets

step "release build for the cross-checks"
cargo build --release --bin eqwatch
bin=$target/release/eqwatch

step "cross-check against Cantera"
.venv/bin/python scripts/crosscheck_cantera.py --bin "$bin"

step "cross-check of the element balances against Cantera's equilibrium compositions"
.venv/bin/python scripts/crosscheck_balance.py --bin "$bin"

step "cross-check against thermo (Peng-Robinson)"
.venv/bin/python scripts/crosscheck_thermo.py --bin "$bin"

step "deploy/: the systemd unit and the Containerfile"
scripts/check-deploy.sh "$target/debug/eqwatch"

step "species data are what the generator makes from the reference files"
.venv/bin/python tools/gen_species.py --check

echo
echo "all tests passed"
