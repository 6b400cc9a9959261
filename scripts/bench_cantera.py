#!/usr/bin/env python3
"""Time Cantera (through its Python interface) on this machine, as a yardstick
for eqwatch's own benchmarks. Not a pass/fail test.

    .venv/bin/python scripts/bench_cantera.py [--repeats N]

Prints
    cantera_k_of_t_us=<median microseconds per K(T) evaluation, shift reaction>
    cantera_equilibrate_reformer_us=<median microseconds per equilibrate('TP')>

The species are the same nasa_gas.yaml entries eqwatch's built-in data come
from, with the reference pressure set to 1 bar (see xcheck_common.py).
Timings include the Python-call overhead, which is part of what a Python user
of Cantera pays.
"""

import argparse
import statistics
import time

import cantera as ct

from xcheck_common import P_STD_PA, cantera_species, parse_reaction


def median_us(fn, repeats, inner):
    """Median over `repeats` batches of the mean time of `inner` calls, in us."""
    fn()  # warm-up (first-call allocations, caches)
    samples = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        for _ in range(inner):
            fn()
        samples.append((time.perf_counter() - t0) / inner * 1e6)
    return statistics.median(samples)


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeats", type=int, default=200, help="batches per timing")
    ap.add_argument("--bin", help="accepted for uniformity with the cross-check scripts; unused")
    args = ap.parse_args()

    # (a) K(T) for the water-gas shift: set T, ln K = -sum nu g/RT.
    nu = parse_reaction("CO + H2O = CO2 + H2")
    gas = ct.Solution(thermo="ideal-gas", species=cantera_species(list(nu)))
    idx = [(gas.species_index(n), v) for n, v in nu.items()]
    temps = [500.0 + 7.0 * i for i in range(100)]  # varying T defeats any caching
    state = {"i": 0}

    def k_of_t():
        T = temps[state["i"] % len(temps)]
        state["i"] += 1
        gas.TP = T, P_STD_PA
        g = gas.standard_gibbs_RT
        return -sum(v * g[i] for i, v in idx)

    t_k = median_us(k_of_t, args.repeats, 50)

    # (b) equilibrate('TP') of the 5-species reformer; composition reset
    # to the feed before every call so each solve starts from scratch (the
    # reset is included in the timing; its own cost is printed separately).
    ref = ct.Solution(thermo="ideal-gas",
                      species=cantera_species(["CH4", "H2O", "CO", "CO2", "H2"]))

    def equilibrate():
        ref.TPX = 1100.0, 30e5, "CH4:1, H2O:3"
        ref.equilibrate("TP")

    def reset_only():
        ref.TPX = 1100.0, 30e5, "CH4:1, H2O:3"

    t_eq = median_us(equilibrate, max(args.repeats // 4, 10), 20)
    t_reset = median_us(reset_only, max(args.repeats // 4, 10), 20)

    print(f"# cantera {ct.__version__}; median of batches, microseconds per call")
    print(f"cantera_k_of_t_us={t_k:.3f}")
    print(f"cantera_equilibrate_reformer_us={t_eq:.3f}")
    print(f"# (of which resetting T, P, composition: {t_reset:.3f} us)")


if __name__ == "__main__":
    main()
