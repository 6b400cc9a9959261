#!/usr/bin/env bash
# Cross-builds the daemon for 64- and 32-bit ARM gateways and checks each binary under
# qemu-user against the host build (the calculator's README example must give the same
# text). Needs: rustup targets, Debian's cross gcc and qemu-user:
#   apt-get install gcc-aarch64-linux-gnu gcc-arm-linux-gnueabihf qemu-user
#   rustup target add aarch64-unknown-linux-gnu armv7-unknown-linux-gnueabihf
# Not part of scripts/test.sh (the CI machine has neither the targets nor qemu).
set -euo pipefail
cd "$(dirname "$0")/.."
target=${CARGO_TARGET_DIR:-target}
export CARGO_TARGET_AARCH64_UNKNOWN_LINUX_GNU_LINKER=aarch64-linux-gnu-gcc \
       CC_aarch64_unknown_linux_gnu=aarch64-linux-gnu-gcc \
       CARGO_TARGET_ARMV7_UNKNOWN_LINUX_GNUEABIHF_LINKER=arm-linux-gnueabihf-gcc \
       CC_armv7_unknown_linux_gnueabihf=arm-linux-gnueabihf-gcc
args=(calc --reaction "CO + H2O = CO2 + H2" --k-source moe-1962
      --temperature "220 degC" --pressure "29 barg"
      --composition "H2=61.0536,N2=18.98637,CO=0.28697,CO2=19.38096,CH4=0.2921"
      --basis dry --steam-ratio 0.36312)
cargo build -q --release --no-default-features --features daemon
want=$("$target/release/eqwatch" "${args[@]}")
fail=0
for spec in aarch64-unknown-linux-gnu:qemu-aarch64:/usr/aarch64-linux-gnu:aarch64-linux-gnu-strip \
            armv7-unknown-linux-gnueabihf:qemu-arm:/usr/arm-linux-gnueabihf:arm-linux-gnueabihf-strip; do
  IFS=: read -r triple qemu sysroot strip <<< "$spec"
  cargo build -q --release --no-default-features --features daemon --target "$triple"
  bin=$target/$triple/release/eqwatch
  "$strip" -o "$bin.stripped" "$bin"
  got=$("$qemu" -L "$sysroot" "$bin" "${args[@]}")
  if [ "$got" = "$want" ]; then verdict="same figures as the host"; else verdict="DIFFERENT from the host"; fail=1; fi
  printf '%s: %s bytes (%s stripped); %s\n' "$triple" "$(stat -c %s "$bin")" "$(stat -c %s "$bin.stripped")" "$verdict"
done
exit $fail
