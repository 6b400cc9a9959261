#!/usr/bin/env bash
# Runs eqwatch's criterion benchmarks (benches/core.rs) and the Cantera yardstick
# (scripts/bench_cantera.py), then prints one summary table in microseconds.
#
#     bash scripts/bench.sh [extra arguments for bench_cantera.py, e.g. --repeats 100]
#
# The eqwatch figure is the middle value of criterion's `time: [low mid high]`
# line (its point estimate per iteration). The Cantera figures are medians of
# batch means and include the Python-call overhead. Full logs are kept under
# target/bench-logs/. Not a pass/fail test.
set -euo pipefail

cd "$(dirname "$0")/.."

python=.venv/bin/python
log_dir=target/bench-logs
mkdir -p "$log_dir"
rust_log=$log_dir/criterion.txt
cantera_log=$log_dir/cantera.txt

echo "== cargo bench --bench core (log: $rust_log)" >&2
# Colour codes would get in the way of parsing.
cargo bench --bench core -- --color never | tee "$rust_log"

echo "== $python scripts/bench_cantera.py (log: $cantera_log)" >&2
if [[ -x $python ]]; then
    "$python" scripts/bench_cantera.py "$@" | tee "$cantera_log"
else
    echo "no $python: Cantera timing skipped (see scripts/requirements.txt)" >&2
    : >"$cantera_log"
fi

# Converts criterion's "<number> <unit>" to microseconds.
to_us() {
    awk -v v="$1" -v u="$2" 'BEGIN {
        f = (u == "ps") ? 1e-6 : (u == "ns") ? 1e-3 : (u == "µs" || u == "us") ? 1 \
          : (u == "ms") ? 1e3 : (u == "s") ? 1e6 : -1
        if (f < 0) { print "?"; exit }
        printf "%.3f", v * f
    }'
}

# Criterion prints the benchmark id and its time line together when the id is short,
# or the id alone on one line and the time line under it when the id is long.
summary=()
last_id=
while IFS= read -r line; do
    if [[ $line =~ ^([A-Za-z0-9_]+/[A-Za-z0-9_]+)[[:space:]]*(time:.*)?$ ]]; then
        last_id=${BASH_REMATCH[1]}
    fi
    if [[ $line =~ time:[[:space:]]+\[([^]]+)\] ]]; then
        read -r _ _ mid mid_unit _ <<<"${BASH_REMATCH[1]}"
        summary+=("$(printf '%-40s %12s' "$last_id" "$(to_us "$mid" "$mid_unit")")")
    fi
done <"$rust_log"

cantera_value() {
    sed -n "s/^$1=//p" "$cantera_log"
}

echo
echo "== summary (microseconds per call)"
printf '%-40s %12s\n' "eqwatch (criterion estimate)" "us"
if ((${#summary[@]} == 0)); then
    echo "(no criterion results parsed; see $rust_log)"
else
    printf '%s\n' "${summary[@]}"
fi
printf '%-40s %12s\n' "Cantera (median, via Python)" "us"
printf '%-40s %12s   (compare k_of_t/species_data)\n' \
    "k_of_t (shift)" "$(cantera_value cantera_k_of_t_us)"
printf '%-40s %12s   (compare equilibrium/reformer_5_species)\n' \
    "equilibrate TP (reformer)" "$(cantera_value cantera_equilibrate_reformer_us)"
