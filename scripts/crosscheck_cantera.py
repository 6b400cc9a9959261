#!/usr/bin/env python3
"""Cross-check eqwatch against Cantera (ideal gas, same NASA 7 data).

    .venv/bin/python scripts/crosscheck_cantera.py --bin target/release/eqwatch

Part A: ln K(T), dH, dS, dG of industrial reactions from `eqwatch calc`
        versus -sum(nu_i g_i/RT) from Cantera's standard_gibbs_RT.
Part B: equilibrium compositions from `eqwatch equilibrium --eos ideal`
        versus Cantera's equilibrate('TP').

Both programs use the very same polynomials (eqwatch's data/species.toml is
transcribed from the nasa_gas.yaml Cantera loads here; checked below), so the
only admissible differences are floating-point round-off and solver
convergence; the tolerances are set accordingly.

Standard state. eqwatch's K is for a 1 bar standard state. For a species at
standard pressure p_ref, mu_i = g_i(T; p_ref) + RT ln(p_i/p_ref), hence
g_i(T; 1 bar) = g_i(T; p_ref) + RT ln(1 bar/p_ref) and
    ln K_1bar = -sum nu_i g_i(T; 1 bar)/RT = ln K_pref + dnu ln(p_ref/1 bar),
dnu = sum nu_i. nasa_gas.yaml declares no reference pressure, so Cantera
would label its data 1 atm and a user would be tempted to apply that
correction (dnu * 0.013163). But the data are really 1 bar data (the N2
polynomial gives S(298.15 K) = 191.609 J/(mol K), the CODATA 1 bar value; see
data/species.toml header), so the right thing is to tell Cantera p_ref = 1 bar
(xcheck_common.cantera_species does that). The correction formula is still
applied below with Cantera's own reference_pressure, and is then exactly zero.
This also makes Cantera's equilibrate use P_ref = 1 bar like eqwatch.
"""

import math
import time
from pathlib import Path

import cantera as ct
from ruamel.yaml import YAML

from xcheck_common import (CANTERA_NAME, P_STD_PA, EqwatchError, Runner, Tally,
                           cantera_species, load_species_toml, parse_args,
                           parse_reaction, require_binary)

# Cantera's gas constant, converted from J/(kmol K) to J/(mol K). It is the
# CODATA 2018 exact value 8.314462618, which eqwatch should also use.
R = ct.gas_constant / 1000.0

REACTIONS = [
    "CH4 + H2O = CO + 3 H2",          # steam methane reforming
    "CO + H2O = CO2 + H2",            # water-gas shift
    "N2 + 3 H2 = 2 NH3",              # ammonia synthesis
    "CO + 3 H2 = CH4 + H2O",          # CO methanation
    "CO2 + 4 H2 = CH4 + 2 H2O",       # CO2 methanation
    "CO + 2 H2 = CH3OH",              # methanol from CO
    "CO2 + 3 H2 = CH3OH + H2O",       # methanol from CO2
    "2 SO2 + O2 = 2 SO3",             # sulphuric-acid converter
    "2 CH3OH = CH3OCH3 + H2O",        # DME dehydration
    "C2H6 = C2H4 + H2",               # ethane dehydrogenation
    "4 NH3 + 5 O2 = 4 NO + 6 H2O",    # ammonia oxidation (nitric acid)
    "2 NO + O2 = 2 NO2",              # NO oxidation (nitric acid)
    "2 N2O = 2 N2 + O2",              # N2O abatement
    "2 H2S + 3 O2 = 2 SO2 + 2 H2O",   # Claus furnace (H2S combustion)
    "COS + H2O = H2S + CO2",          # COS hydrolysis
    "4 HCl + O2 = 2 Cl2 + 2 H2O",     # Deacon process
    "CH4 + NH3 = HCN + 3 H2",         # HCN synthesis (BMA type)
    "CH3OH = CH2O + H2",              # formaldehyde by dehydrogenation
    "C3H8 + 3 H2O = 3 CO + 7 H2",     # propane reforming
]
# The Claus catalytic step 2 H2S + SO2 = 3/x Sx + 2 H2O is not tested: sulphur
# vapour species are not among eqwatch's built-in species.

# 1000 K is left out of this list on purpose: it is the low/high range
# boundary of most species; it is tested separately below.
TEMPERATURES_K = [400.0, 500.0, 600.0, 700.0, 800.0, 900.0, 1100.0, 1200.0, 1300.0]

# Tolerances, part A.
# ln K: identical polynomials, evaluated in double precision on both sides;
# |ln K| < ~60 here, so round-off is ~1e-13. 1e-6 leaves room only for
# summation-order effects, not for any transcription or formula error (a
# single wrong digit in a coefficient or a 1 atm/1 bar mix-up, dnu*0.0132,
# is far larger).
TOL_LNK = 1e-6
# dH: same argument; |dH| up to ~1e6 J/mol, so relative 1e-8 (or 1e-3 J/mol
# absolute for reactions with dH near zero).
RTOL_DH, ATOL_DH = 1e-8, 1e-3
# dS: same data; relative 1e-8 or 1e-6 J/(mol K) absolute.
RTOL_DS, ATOL_DS = 1e-8, 1e-6

# Tolerances, part B (equilibrium). Cantera's element-potential solver and
# its VCS solver agree with each other to ~1e-9 on these cases (checked when
# this script was written), and the reference residuals |ln Q - ln K| are
# checked below; eqwatch must match to:
ATOL_Y = 1e-7        # absolute, for y > TRACE_Y
RTOL_Y = 1e-5        # relative, for y > TRACE_Y
TRACE_Y = 1e-6       # below this compare ln y instead
TOL_LNY = 1e-4       # |ln y_eqwatch - ln y_cantera| for trace species
TOL_RESIDUAL = 1e-6  # reference self-consistency |ln Q - ln K| at Cantera's answer
TOL_SUM = 1e-9       # sum of eqwatch mole fractions must be 1


def make_gas(names):
    return ct.Solution(thermo="ideal-gas", species=cantera_species(names))


def cantera_reaction_props(gas, nu, T):
    """ln K (1 bar), dH, dS, dG at T from Cantera standard-state properties."""
    gas.TP = T, P_STD_PA
    idx = {n: gas.species_index(n) for n in nu}
    g_rt = gas.standard_gibbs_RT
    h_rt = gas.standard_enthalpies_RT
    s_r = gas.standard_entropies_R
    ln_k_pref = -sum(v * g_rt[idx[n]] for n, v in nu.items())
    dnu = sum(nu.values())
    # Correction to 1 bar derived in the module docstring; zero here because
    # cantera_species() sets p_ref = 1 bar.
    ln_k = ln_k_pref + dnu * math.log(gas.reference_pressure / P_STD_PA)
    dh = sum(v * h_rt[idx[n]] for n, v in nu.items()) * R * T
    ds = sum(v * s_r[idx[n]] for n, v in nu.items()) * R
    return float(ln_k), float(dh), float(ds), float(-R * T * ln_k)


def check_data_file(tally, species_toml):
    """eqwatch's built-in data must be the polynomials Cantera uses here."""
    # Read the raw file: Cantera's re-serialised input_data would turn a
    # single-range species (Ar, He) into two identical ranges.
    raw = None
    for d in ct.get_data_directories():
        path = Path(d) / "nasa_gas.yaml"
        if path.is_file():
            raw = YAML(typ="safe", pure=True).load(path.read_text())
            break
    all_sp = {sp["name"]: sp for sp in raw["species"]}
    bad = []
    for name, sp in species_toml.items():
        th = all_sp[CANTERA_NAME.get(name, name)]["thermo"]
        mine = [(b["t_min_k"], b["t_max_k"], b["coefficients"]) for b in sp["nasa7"]]
        tr = [float(t) for t in th["temperature-ranges"]]
        theirs = [(tr[i], tr[i + 1], [float(c) for c in d]) for i, d in enumerate(th["data"])]
        if mine != theirs:
            bad.append(name)
    tally.check("data/species.toml == nasa_gas.yaml", not bad,
                f"{len(species_toml)} species compared coefficient by coefficient (exact)"
                + (f"; differing: {bad}" if bad else ""))


def part_a(tally, run, species_toml):
    for rxn in REACTIONS:
        nu = parse_reaction(rxn)
        gas = make_gas(list(nu))
        # Only temperatures inside every species' data range.
        t_lo = max(species_toml[n]["nasa7"][0]["t_min_k"] for n in nu)
        t_hi = min(species_toml[n]["nasa7"][-1]["t_max_k"] for n in nu)
        temps = [T for T in TEMPERATURES_K if t_lo <= T <= t_hi]
        if len(temps) < 5:
            tally.check(rxn, False, f"only {len(temps)} temperatures inside data range")
            continue
        for T in temps:
            label = f"[{rxn}] {T:g} K"
            ln_k, dh, ds, dg = cantera_reaction_props(gas, nu, T)
            try:
                out = run("calc", "--reaction", rxn, "--temperature", f"{T:g} K")
            except EqwatchError as e:
                tally.error(label, e)
                continue
            tally.close_abs(f"{label} ln_k", out.get("ln_k"), ln_k, TOL_LNK)
            tally.close_rel(f"{label} delta_h", out.get("delta_h_j_per_mol"), dh,
                            RTOL_DH, ATOL_DH, "J/mol ")
            tally.close_rel(f"{label} delta_s", out.get("delta_s_j_per_mol_k"), ds,
                            RTOL_DS, ATOL_DS, "J/(mol K) ")
            # dG = -RT ln K, so its tolerance follows from TOL_LNK.
            tally.close_abs(f"{label} delta_g", out.get("delta_g_j_per_mol"), dg,
                            R * T * TOL_LNK, "J/mol ")

    # Range boundary: at exactly 1000 K the low- and high-range fits of a
    # species differ slightly (the NASA fits are only approximately continuous
    # there). eqwatch may use either side; accept anything within the spread
    # of the two one-sided Cantera values plus TOL_LNK.
    for rxn in ("CH4 + H2O = CO + 3 H2", "N2 + 3 H2 = 2 NH3", "2 SO2 + O2 = 2 SO3"):
        nu = parse_reaction(rxn)
        gas = make_gas(list(nu))
        below = cantera_reaction_props(gas, nu, 1000.0 - 1e-9)[0]
        above = cantera_reaction_props(gas, nu, 1000.0 + 1e-9)[0]
        mid, half = 0.5 * (below + above), 0.5 * abs(below - above)
        try:
            out = run("calc", "--reaction", rxn, "--temperature", "1000 K")
            tally.close_abs(f"[{rxn}] 1000 K (range boundary; fits differ by {2 * half:.2e})",
                            out.get("ln_k"), mid, half + TOL_LNK)
        except EqwatchError as e:
            tally.error(f"[{rxn}] 1000 K", e)

    # Temperature unit: 426.85 degC is 700 K (426.85 + 273.15).
    rxn = "N2 + 3 H2 = 2 NH3"
    nu = parse_reaction(rxn)
    ln_k = cantera_reaction_props(make_gas(list(nu)), nu, 700.0)[0]
    try:
        out = run("calc", "--reaction", rxn, "--temperature", "426.85 degC")
        # 1e-9 K: only the round-off of 426.85 + 273.15 in binary floating point.
        tally.close_abs(f"[{rxn}] '426.85 degC' temperature_k", out.get("temperature_k"),
                        700.0, 1e-9, "K ")
        tally.close_abs(f"[{rxn}] '426.85 degC' ln_k", out.get("ln_k"), ln_k, TOL_LNK)
    except EqwatchError as e:
        tally.error(f"[{rxn}] 426.85 degC", e)


# ---------------------------------------------------------------- part B

# Each case: eqwatch arguments and the Cantera counterpart.
#   species   reactive species given to eqwatch --species
#   inert     species given to eqwatch --inert (may be empty)
#   feed      moles (relative)
#   T, P      strings passed to eqwatch; T_K, P_PA the same values in SI
#   stand_in  eqwatch inert name -> Cantera species standing in for it
#   basis     independent reactions whose ln Q - ln K must vanish at
#             Cantera's answer (a self-check of the reference)
CASES = [
    dict(label="reformer 1100 K 30 bar",
         species=["CH4", "H2O", "CO", "CO2", "H2"], inert=[],
         feed={"CH4": 1, "H2O": 3}, T="1100 K", P="30 bar", T_K=1100.0, P_PA=30e5,
         basis=["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]),
    # 796 degC = 1069.15 K; 30 barg = 31.01325 bar absolute (gauge pressure
    # relative to a standard atmosphere, 1.01325 bar). Exercises unit parsing.
    dict(label="reformer 796 degC 30 barg",
         species=["CH4", "H2O", "CO", "CO2", "H2"], inert=[],
         feed={"CH4": 1, "H2O": 3}, T="796 degC", P="30 barg", T_K=1069.15,
         P_PA=31.01325e5,
         basis=["CH4 + H2O = CO + 3 H2", "CO + H2O = CO2 + H2"]),
    # Ar cannot react with anything in the set: Cantera treats it as inert
    # naturally (its own element is conserved).
    dict(label="ammonia 700 K 150 bar",
         species=["N2", "H2", "NH3"], inert=["Ar"],
         feed={"N2": 1, "H2": 3, "Ar": 0.1}, T="700 K", P="150 bar", T_K=700.0,
         P_PA=150e5, basis=["N2 + 3 H2 = 2 NH3"]),
    # N2 is listed as a species but no N-containing product exists, so it is
    # inert in both programs. CO and CO2 end at ~1e-13 (methanator outlet):
    # they are compared on a log scale.
    dict(label="methanator 600 K 28 bar",
         species=["CO", "CO2", "H2", "CH4", "H2O", "N2"], inert=[],
         feed={"H2": 74, "N2": 24.5, "CH4": 1, "CO": 0.3, "CO2": 0.1, "H2O": 0.1},
         T="600 K", P="28 bar", T_K=600.0, P_PA=28e5,
         basis=["CO + 3 H2 = CH4 + H2O", "CO + H2O = CO2 + H2"]),
    dict(label="SO2 converter 700 K 1.2 bar",
         species=["SO2", "O2", "SO3", "N2"], inert=[],
         feed={"SO2": 10, "O2": 11, "N2": 79}, T="700 K", P="1.2 bar", T_K=700.0,
         P_PA=1.2e5, basis=["2 SO2 + O2 = 2 SO3"]),
    dict(label="SO2 converter 900 K 1.2 bar",
         species=["SO2", "O2", "SO3", "N2"], inert=[],
         feed={"SO2": 10, "O2": 11, "N2": 79}, T="900 K", P="1.2 bar", T_K=900.0,
         P_PA=1.2e5, basis=["2 SO2 + O2 = 2 SO3"]),
    # CH4 as a declared inert. Cantera has no "inert" switch: with CH4 in the
    # phase it would react (methanation). In an ideal gas an inert species
    # enters the equilibrium only through its mole number (dilution), never
    # through its g(T); so on the Cantera side Ar (which cannot react) stands
    # in for it with the same 15 mol, and y_CH4(eqwatch) is compared with
    # y_Ar(Cantera). (Rescaling a CH4-free equilibrium would not be exact,
    # because the total mole number changes as methanol forms.)
    dict(label="methanol 500 K 80 bar (CH4 inert)",
         species=["CO", "CO2", "H2", "CH3OH", "H2O"], inert=["CH4"],
         feed={"CO": 10, "CO2": 5, "H2": 70, "CH4": 15}, T="500 K", P="80 bar",
         T_K=500.0, P_PA=80e5, stand_in={"CH4": "Ar"},
         basis=["CO + 2 H2 = CH3OH", "CO2 + 3 H2 = CH3OH + H2O"]),
]


def cantera_equilibrium(case):
    stand_in = case.get("stand_in", {})
    names = case["species"] + [stand_in.get(n, n) for n in case["inert"]]
    gas = make_gas(names)
    feed = {stand_in.get(n, n): v for n, v in case["feed"].items()}
    gas.TPX = case["T_K"], case["P_PA"], feed
    gas.equilibrate("TP", solver="element_potential", rtol=1e-14, max_steps=10000)
    y = {n: float(gas.X[gas.species_index(n)]) for n in case["species"]}
    for n in case["inert"]:
        y[n] = float(gas.X[gas.species_index(stand_in.get(n, n))])
    # Reference self-check: every basis reaction at equilibrium,
    # ln Q = sum nu_i ln(y_i P / 1 bar) must equal ln K(T) (ideal gas).
    worst = 0.0
    for rxn in case["basis"]:
        nu = parse_reaction(rxn)
        ln_k = cantera_reaction_props(gas, nu, case["T_K"])[0]
        ln_q = sum(v * math.log(y[n] * case["P_PA"] / P_STD_PA) for n, v in nu.items())
        worst = max(worst, abs(ln_q - ln_k))
    return y, worst


def part_b(tally, run):
    for case in CASES:
        lab = case["label"]
        y_ref, resid = cantera_equilibrium(case)
        tally.check(f"{{{lab}}} reference |lnQ-lnK|", resid <= TOL_RESIDUAL,
                    f"Cantera residual {resid:.2e} tol {TOL_RESIDUAL:g}")
        args = ["equilibrium", "--species", ",".join(case["species"]),
                "--feed", ",".join(f"{k}={v:g}" for k, v in case["feed"].items()),
                "--temperature", case["T"], "--pressure", case["P"], "--eos", "ideal"]
        if case["inert"]:
            args += ["--inert", ",".join(case["inert"])]
        try:
            out = run(*args)
        except EqwatchError as e:
            tally.error(f"{{{lab}}}", e)
            continue
        tally.check(f"{{{lab}}} converged", out.get("converged") is True,
                    f"converged={out.get('converged')!r} iterations={out.get('iterations')!r}")
        y = out.get("mole_fractions") or {}
        missing = sorted(set(y_ref) - set(y))
        if missing:
            tally.check(f"{{{lab}}} species present", False, f"missing {missing}")
            continue
        total = sum(y[n] for n in y_ref)
        tally.close_abs(f"{{{lab}}} sum y", total, 1.0, TOL_SUM)
        for n, yr in y_ref.items():
            yg = y[n]
            if yr > TRACE_Y:
                ok = (isinstance(yg, (int, float)) and abs(yg - yr) <= ATOL_Y
                      and abs(yg - yr) <= RTOL_Y * yr)
                tally.check(f"{{{lab}}} y_{n}", ok,
                            f"eqwatch {yg!r} ref {yr!r} diff {yg - yr:.3e} "
                            f"tol {ATOL_Y:g} abs and {RTOL_Y:g} rel")
            else:
                ok = isinstance(yg, (int, float)) and yg > 0 and \
                    abs(math.log(yg) - math.log(yr)) <= TOL_LNY
                d = math.log(yg) - math.log(yr) if isinstance(yg, (int, float)) and yg > 0 \
                    else float("nan")
                tally.check(f"{{{lab}}} ln y_{n} (trace)", ok,
                            f"eqwatch {yg!r} ref {yr!r} diff(ln) {d:.3e} tol {TOL_LNY:g}")


def main():
    args = parse_args(__doc__.splitlines()[0])
    tally = Tally("cantera")
    t0 = time.perf_counter()
    species_toml = load_species_toml()
    check_data_file(tally, species_toml)
    require_binary(args.bin, tally)
    run = Runner(args.bin, args.verbose)
    part_a(tally, run, species_toml)
    part_b(tally, run)
    print(f"(elapsed {time.perf_counter() - t0:.1f} s; cantera {ct.__version__})")
    tally.finish()


if __name__ == "__main__":
    main()
