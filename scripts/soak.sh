#!/usr/bin/env bash
# Soak of the daemon (benches/soak.rs): the demo plant at high speed for 10 minutes
# through a mosquitto restarted every 30 s, the daemon SIGKILLed twice; prints results
# computed / journaled / received and RSS, and fails if a journaled result never
# arrived. Not part of scripts/test.sh.
#   EQWATCH_SOAK_SECS=600 EQWATCH_SOAK_SPEED=1200 scripts/soak.sh
set -euo pipefail
cd "$(dirname "$0")/.."
command -v mosquitto >/dev/null || [ -x /usr/sbin/mosquitto ] || {
    apt-get install -y mosquitto >/dev/null
}
exec cargo bench --bench soak
