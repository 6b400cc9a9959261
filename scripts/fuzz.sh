#!/usr/bin/env bash
# Time-boxed fuzzing of eqwatch's input paths with cargo-fuzz (libFuzzer), on the stable
# toolchain without a sanitizer (-s none). Not part of scripts/test.sh.
#
#   scripts/fuzz.sh            # every target, FUZZ_SECONDS each (default 60)
#   FUZZ_SECONDS=600 scripts/fuzz.sh input_message
#
# Targets (fuzz/fuzz_targets): input_message (payload decoding and the pipeline),
# history_rows (replay CSV rows), config_file, reaction_equation, unit_text,
# sparkplug_message (Sparkplug B payloads through the host consumer). Seeds are in
# fuzz/corpus/<target>; a crash leaves its input in fuzz/artifacts/<target> and fails.
set -euo pipefail
cd "$(dirname "$0")/.."
seconds="${FUZZ_SECONDS:-60}"
targets=("$@")
if [ ${#targets[@]} -eq 0 ]; then
    targets=(input_message history_rows config_file reaction_equation unit_text sparkplug_message)
fi
if ! cargo fuzz --version >/dev/null 2>&1; then
    echo "installing cargo-fuzz (a few minutes, once)"
    cargo install cargo-fuzz --locked
fi
summary=()
for t in "${targets[@]}"; do
    echo "== $t: ${seconds} s"
    log="$(mktemp)"
    # -s none: no sanitizer (sanitizers need a nightly compiler); panics still abort.
    if ! cargo fuzz run -s none "$t" "fuzz/corpus/$t" -- \
        -max_total_time="$seconds" -print_final_stats=1 -max_len=4096 2>&1 | tee "$log" | grep -aE "^(#[0-9]+.*(DONE|pulse)|==|stat::)" ; then
        :
    fi
    if grep -aq "panicked\|ERROR: libFuzzer\|SUMMARY" "$log"; then
        grep -aE "panicked|ERROR|Test unit written" "$log" | head -5
        echo "FAILED: $t (see fuzz/artifacts/$t)"
        exit 1
    fi
    runs="$(grep -ao 'stat::number_of_executed_units: [0-9]*' "$log" | grep -o '[0-9]*$' || echo '?')"
    cov="$(grep -ao 'cov: [0-9]*' "$log" | tail -1 | grep -o '[0-9]*$' || echo '?')"
    summary+=("$t: $runs runs in ${seconds} s, coverage $cov edges, no crash")
    rm -f "$log"
done
printf '%s\n' "${summary[@]}"
