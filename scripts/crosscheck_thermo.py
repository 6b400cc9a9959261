#!/usr/bin/env python3
"""Cross-check eqwatch's Peng-Robinson fugacity coefficients against thermo.

    .venv/bin/python scripts/crosscheck_thermo.py --bin target/release/eqwatch

Reference: thermo's PRMIX (Peng & Robinson, Ind. Eng. Chem. Fundam. 15 (1976)
59; van der Waals one-fluid mixing, all binary interaction parameters zero),
with Tc, Pc, omega read from the [species.critical] blocks of
data/species.toml -- which must be, and are checked to be, exactly the
default values of the chemicals package that thermo itself would use.

eqwatch is run as
    eqwatch calc --reaction R --temperature T --pressure P
                 --composition C --composition-unit mol% --eos peng-robinson --json
and its `fugacity_coefficients`, `compressibility_factor` and `ln_q` are
compared with the reference.
"""

import math
import time

import chemicals
import thermo
from chemicals import acentric, critical
from thermo import PRMIX

from xcheck_common import (P_STD_PA, EqwatchError, Runner, Tally, load_species_toml,
                           parse_args, parse_reaction, require_binary)

# CAS numbers used to look up chemicals' defaults (same as tools/gen_species.py).
CAS = {"H2": "1333-74-0", "N2": "7727-37-9", "NH3": "7664-41-7", "Ar": "7440-37-1",
       "CH4": "74-82-8", "CO": "630-08-0", "CO2": "124-38-9", "CH3OH": "67-56-1",
       "H2O": "7732-18-5"}

AMMONIA_LOOP = {"H2": 60.0, "N2": 20.0, "NH3": 15.0, "Ar": 3.0, "CH4": 2.0}
METHANOL_LOOP = {"H2": 70.0, "CO": 10.0, "CO2": 5.0, "CH4": 10.0, "CH3OH": 3.0, "H2O": 2.0}

# (label, reaction, composition mol%, T string, P string, T in K, P in Pa)
CASES = [
    ("ammonia loop 700 K 150 bar", "N2 + 3 H2 = 2 NH3", AMMONIA_LOOP,
     "700 K", "150 bar", 700.0, 150e5),
    ("ammonia loop 700 K 300 bar", "N2 + 3 H2 = 2 NH3", AMMONIA_LOOP,
     "700 K", "300 bar", 700.0, 300e5),
    # 200 atm = 202.65 bar exactly (1 atm = 1.01325 bar by definition).
    ("ammonia loop 450 degC 200 atm", "N2 + 3 H2 = 2 NH3", AMMONIA_LOOP,
     "450 degC", "202.65 bar", 723.15, 202.65e5),
    ("methanol loop 520 K 80 bar", "CO2 + 3 H2 = CH3OH + H2O", METHANOL_LOOP,
     "520 K", "80 bar", 520.0, 80e5),
]

# Tolerance on phi_i and Z, relative. Both sides solve the same cubic with the
# same inputs: thermo uses the exact PR constants Omega_a = 0.45723552892138...
# and Omega_b = 0.07779607390388..., kappa = 0.37464 + 1.54226 w - 0.26992 w^2
# for every w, and R = 8.31446261815324 (CODATA 2018 to 1e-12). Root-finding
# and summation round-off are ~1e-13, so 1e-6 still exposes any real
# difference: e.g. the textbook-rounded 0.45724 / 0.07780 shift phi and Z by
# 2-3e-6 at 700 K / 150 bar (measured with thermo when writing this script).
RTOL_PHI = 1e-6
RTOL_Z = 1e-6
# ln Q = sum nu_i ln(phi_i y_i P / 1 bar): its error follows from RTOL_PHI
# (|sum nu| <= 4 here, so 4e-6), plus the echo of P.
TOL_LNQ = 5e-6

# Reference values of docs/domain.md §4 (thermo 0.6.1 PRMIX,
# chemicals' default critical constants), given to 4 decimals: the setup must
# reproduce them to half a unit in the last digit, 5e-5.
DOMAIN_700K_150BAR = {"H2": 1.0356, "N2": 1.0546, "NH3": 0.9886, "Z": 1.0330}
TOL_DOMAIN = 5e-5


def critical_constants(tally, species_toml, names):
    """Tc, Pc (Pa), omega from data/species.toml; checked against chemicals."""
    out = {}
    for n in names:
        cr = species_toml[n].get("critical")
        if cr is None:
            tally.check(f"critical constants {n}", False, "no [species.critical] block")
            continue
        tc, pc, om = cr["tc_k"], cr["pc_bar"] * 1e5, cr["omega"]
        ref = (critical.Tc(CAS[n]), critical.Pc(CAS[n]), acentric.omega(CAS[n]))
        # Tc and omega are copied verbatim; Pc went through /1e5 and *1e5, which
        # may change the last bit only (relative 2.2e-16 each), hence 1e-12.
        ok = tc == ref[0] and om == ref[2] and abs(pc - ref[1]) <= 1e-12 * ref[1]
        tally.check(f"critical constants {n} == chemicals defaults", ok,
                    f"file Tc {tc} K Pc {pc:.6g} Pa w {om}; chemicals {ref[0]} K "
                    f"{ref[1]:.6g} Pa {ref[2]}")
        out[n] = (tc, pc, om)
    return out


def thermo_pr(consts, comp, T, P):
    """phi_i and Z of the gas from thermo's PRMIX (kij = 0)."""
    names = list(comp)
    total = sum(comp.values())
    zs = [comp[n] / total for n in names]
    eos = PRMIX(T=T, P=P, Tcs=[consts[n][0] for n in names],
                Pcs=[consts[n][1] for n in names],
                omegas=[consts[n][2] for n in names], zs=zs, kijs=None)
    # Supercritical mixtures have a single real root, which thermo may label
    # 'l' or 'g'; if there are two, the stable one has the lower Gibbs energy.
    if eos.phase == "l/g":
        side = "l" if eos.G_dep_l < eos.G_dep_g else "g"
    else:
        side = eos.phase
    phis = getattr(eos, f"phis_{side}")
    z = getattr(eos, f"Z_{side}")
    return dict(zip(names, phis)), z, dict(zip(names, zs))


def main():
    args = parse_args(__doc__.splitlines()[0])
    tally = Tally("thermo")
    t0 = time.perf_counter()
    species_toml = load_species_toml()
    all_names = sorted(set(AMMONIA_LOOP) | set(METHANOL_LOOP))
    consts = critical_constants(tally, species_toml, all_names)
    if len(consts) != len(all_names):
        tally.finish()

    # Setup proof: thermo reproduces the docs/domain.md §4 values.
    phi, z, _ = thermo_pr(consts, AMMONIA_LOOP, 700.0, 150e5)
    print("DOMAIN reference, 700 K / 150 bar, thermo PRMIX: "
          + ", ".join(f"phi_{k} = {v}" for k, v in DOMAIN_700K_150BAR.items() if k != "Z")
          + f", Z = {DOMAIN_700K_150BAR['Z']}")
    for k, ref in DOMAIN_700K_150BAR.items():
        got = z if k == "Z" else phi[k]
        tally.close_abs(f"thermo setup reproduces DOMAIN {'Z' if k == 'Z' else 'phi_' + k}",
                        got, ref, TOL_DOMAIN, who="thermo")

    require_binary(args.bin, tally)
    run = Runner(args.bin, args.verbose)
    for label, rxn, comp, t_str, p_str, T, P in CASES:
        phi_ref, z_ref, y = thermo_pr(consts, comp, T, P)
        comp_arg = ",".join(f"{n}={v:g}" for n, v in comp.items())
        try:
            out = run("calc", "--reaction", rxn, "--temperature", t_str, "--pressure", p_str,
                      "--composition", comp_arg, "--composition-unit", "mol%",
                      "--eos", "peng-robinson")
        except EqwatchError as e:
            tally.error(f"{{{label}}}", e)
            continue
        # Echoed state: T from a unit conversion (1e-9 K round-off), P in bar.
        tally.close_abs(f"{{{label}}} temperature_k", out.get("temperature_k"), T, 1e-9, "K ")
        tally.close_abs(f"{{{label}}} pressure_bar", out.get("pressure_bar"), P / 1e5, 1e-9,
                        "bar ")
        phis = out.get("fugacity_coefficients") or {}
        for n in comp:
            tally.close_rel(f"{{{label}}} phi_{n}", phis.get(n), phi_ref[n], RTOL_PHI)
        tally.close_rel(f"{{{label}}} Z", out.get("compressibility_factor"), z_ref, RTOL_Z)
        # Reaction quotient in fugacities, f_i = phi_i y_i P, standard state 1 bar.
        nu = parse_reaction(rxn)
        ln_q = sum(v * math.log(phi_ref[n] * y[n] * P / P_STD_PA) for n, v in nu.items())
        tally.close_abs(f"{{{label}}} ln_q (fugacity based)", out.get("ln_q"), ln_q, TOL_LNQ)

    print(f"(elapsed {time.perf_counter() - t0:.1f} s; thermo {thermo.__version__}, "
          f"chemicals {chemicals.__version__})")
    tally.finish()


if __name__ == "__main__":
    main()
