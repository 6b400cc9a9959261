#!/usr/bin/env bash
# Checks what a site installs from deploy/: the systemd unit (systemd-analyze verify and
# the exposure score of `systemd-analyze security --offline`, gated at THRESHOLD) and
# the Containerfile (its structure always; a real build where podman or docker can).
# Called by scripts/test.sh; runs alone too: scripts/check-deploy.sh [path/to/eqwatch]
set -euo pipefail
cd "$(dirname "$0")/.."
# systemd-analyze's --threshold is in tenths of the exposure score: 9 means 0.9.
THRESHOLD=${EQWATCH_UNIT_THRESHOLD:-9}
target=${CARGO_TARGET_DIR:-target}
bin=${1:-$target/debug/eqwatch}
unit=deploy/eqwatch.service
fail=0

if command -v systemd-analyze >/dev/null 2>&1; then
  # verify resolves ExecStart= paths: check a copy that points at the built binary.
  tmp=$(mktemp -d)
  trap 'rm -rf "$tmp"' EXIT
  sed "s|/usr/local/bin/eqwatch|$(realpath "$bin")|g" "$unit" > "$tmp/eqwatch.service"
  out=$(systemd-analyze verify "$tmp/eqwatch.service" 2>&1 || true)
  # Complaints about this unit (unknown keys, bad values, missing commands); lines about
  # other units on this machine are not ours.
  ours=$(printf '%s\n' "$out" | grep -E 'eqwatch\.service' || true)
  if [ -n "$ours" ]; then
    echo "systemd-analyze verify $unit:" >&2
    printf '%s\n' "$ours" >&2
    fail=1
  else
    echo "unit: systemd-analyze verify clean"
  fi
  score=$(systemd-analyze security --offline=true "$unit" 2>/dev/null | sed -n 's/.*Overall exposure level for .*: \([0-9.]*\).*/\1/p')
  if systemd-analyze security --offline=true --threshold="$THRESHOLD" "$unit" >/dev/null 2>&1; then
    echo "unit: exposure $score (gate: at most $THRESHOLD tenths)"
  else
    echo "unit: exposure ${score:-?} is over the gate of $THRESHOLD tenths (systemd-analyze security --offline=true $unit)" >&2
    fail=1
  fi
else
  echo "unit: systemd-analyze not on this machine; unit not verified (Debian package systemd)"
fi

python3 - deploy/container/Containerfile .dockerignore <<'PY' || fail=1
import re, sys
path, ignore = sys.argv[1], sys.argv[2]
lines = []
for raw in open(path, encoding="utf-8"):
    s = raw.strip()
    if s and not s.startswith("#"):
        lines.append(s)
# Join continuation lines.
text = "\n".join(lines).replace("\\\n", " ")
instr = [l.split(None, 1) for l in text.splitlines()]
problems = []
froms = [a for a in instr if a[0].upper() == "FROM"]
if len(froms) < 2:
    problems.append("not multi-stage (one FROM)")
final = max(i for i, a in enumerate(instr) if a[0].upper() == "FROM")
stage = instr[final:]
users = [a[1] for a in stage if a[0].upper() == "USER"]
if not users or users[-1].split(":")[0] in ("0", "root"):
    problems.append("the final stage does not switch to a non-root USER")
if not any(a[0].upper() == "COPY" and "--from=" in a[1] for a in stage):
    problems.append("the final stage does not copy the binary from the build stage")
if any(a[0].upper() == "ADD" for a in instr):
    problems.append("ADD used (COPY only: no remote or archive magic)")
for a in froms:
    image = a[1].split()[0]
    if ":" not in image.split("/")[-1] or image.endswith(":latest"):
        problems.append(f"base image {image} is not pinned to a tag")
build = [a[1] for a in instr if a[0].upper() == "RUN" and "cargo build" in a[1]]
if not build or "--locked" not in build[0] or "--release" not in build[0]:
    problems.append("the binary is not built with cargo build --release --locked")
if not any(a[0].upper() == "VOLUME" and "/var/lib/eqwatch" in a[1] for a in stage):
    problems.append("no VOLUME for the journal (/var/lib/eqwatch)")
if not any(a[0].upper() == "ENTRYPOINT" and "eqwatch" in a[1] for a in stage):
    problems.append("ENTRYPOINT is not the eqwatch binary")
ign = open(ignore, encoding="utf-8").read().split()
for must in ("target/", ".venv/", ".git/"):
    if must not in ign:
        problems.append(f".dockerignore does not leave out {must}")
if problems:
    print("Containerfile:", *problems, sep="\n  ", file=sys.stderr)
    sys.exit(1)
print("Containerfile: multi-stage, non-root, pinned bases, locked release build, journal volume")
PY

# A real build where an engine can (not on the CI machine: no container daemon there).
engine=""
if command -v podman >/dev/null 2>&1 && podman info >/dev/null 2>&1; then engine=podman
elif command -v docker >/dev/null 2>&1 && docker info >/dev/null 2>&1; then engine=docker
fi
if [ -n "$engine" ] && [ "${EQWATCH_BUILD_IMAGE:-0}" = 1 ]; then
  $engine build -f deploy/container/Containerfile -t eqwatch:check . || fail=1
  $engine run --rm eqwatch:check --version || fail=1
  uid=$($engine image inspect eqwatch:check --format '{{.Config.User}}')
  echo "image: eqwatch:check runs as $uid; $($engine image inspect eqwatch:check --format '{{.Size}}') bytes"
else
  echo "image: not built here (set EQWATCH_BUILD_IMAGE=1 where podman or docker runs)"
fi
exit $fail
