#!/usr/bin/env bash
# Regenerates src/wire/sparkplug_b.rs (the Sparkplug B payload types, prost) from
# proto/sparkplug_b.proto. Dev-only: the build uses the checked-in file and needs no
# protoc. Needs protoc (Debian package protobuf-compiler).
set -euo pipefail
cd "$(dirname "$0")/.."
command -v protoc >/dev/null || { echo "protoc not found: apt-get install protobuf-compiler" >&2; exit 1; }
cargo run -q --manifest-path tools/gen-sparkplug/Cargo.toml --target-dir "${CARGO_TARGET_DIR:-target}/gen-sparkplug" -- proto src/wire/sparkplug_b.rs
rustfmt --edition 2024 src/wire/sparkplug_b.rs
echo "src/wire/sparkplug_b.rs regenerated"
