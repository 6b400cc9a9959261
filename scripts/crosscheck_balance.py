#!/usr/bin/env python3
"""Cross-check `eqwatch balance` against Cantera's equilibrium compositions.

    .venv/bin/python scripts/crosscheck_balance.py --bin target/release/eqwatch

For six invented reactor feeds at plant-like T and P, Cantera equilibrates the
inlet (equilibrate('TP'), the species eqwatch's data/species.toml transcribes
from nasa_gas.yaml). The inlet is given a molar flow; the outlet molar flows
follow from Cantera's equilibrium mole fractions and a total chosen so that the
outlet carries as many atoms as the inlet (Cantera's own n_atoms data; eqwatch's
element data are not used on this side). Each stream is split into a dry
analysis and a water flow and handed to `eqwatch balance --input`. Checks:

(a) eqwatch's atom flows in and out per element equal those computed here from
    Cantera's species element data;
(b) every element closure is 1;
(c) everything measured with small sigma: the adjustments and the global
    statistic vanish and the global test passes;
(d) outlet water unmeasured: the reconciled outlet water and outlet
    steam-to-dry-gas ratio are Cantera's (and the inlet S/C is the feed's);
(e) one outlet analysis component 20 % high: the global test fails and the
    suspect is that component or one the balances cannot tell from it.

Tolerances are derived beside their constants below.
"""

import json
import tempfile
import time
from pathlib import Path

import cantera as ct

from xcheck_common import EqwatchError, Runner, Tally, cantera_species, parse_args, require_binary

# ---------------------------------------------------------------- tolerances

# (a) Atom flows. Both sides compute F * sum(a_ek y_k) + w_e W from the very same
# numbers (the JSON carries them at full double precision, repr round-trips), so
# the only difference is summation order: ~10 ulp, 1e-15 relative. 1e-9 is far
# above that and far below any element-data error (one atom wrong in one species
# is at least ~0.1 % of an element's flow in these feeds).
RTOL_ATOMS = 1e-9
# (b) Closures: Cantera's element-potential solver keeps the element amounts to
# round-off (checked per case below, "reference closure"), and the outlet total
# is fitted on all atoms together, so every closure is 1 to ~1e-13; 1e-9 leaves
# three orders of magnitude of margin and still catches a lost species (the
# smallest non-trace outlet species here carries > 1e-4 of an element).
TOL_CLOSURE = 1e-9
# (c) With every closure within TOL_CLOSURE and sigma no smaller than 1e-3 of
# a reading (flows, major components; trace components have tiny atom flows and
# barely move), the residual to distribute is at most ~1e-9 of a stream in units
# of ~1e-3 of a stream: adjustments of at most ~1e-6 sigma, and the global
# statistic (a sum of squared adjustments in sigma) at most ~1e-12 per degree of
# freedom. The solver stops at 1e-9 sigma steps and 1e-12 constraint residual.
TOL_ADJ_SIGMA = 1e-6
TOL_GAMMA = 1e-10
# (d) The outlet water is what the H and O balances leave over. An error eps in
# the other atom flows (at most TOL_CLOSURE of them) becomes an error in the
# water amplified by (H atoms out)/(H atoms in the water out); the tolerance is
# TOL_CLOSURE times that amplification, computed per case (it is 2-200 here).
# The reformer feed's S/C is 3 by construction (75 mol H2O per 25 mol CH4).
SC_REFORMER = 3.0

SIGMA_SMALL = dict(sigma_flow_pct=0.1, sigma_fraction_pct=0.1, sigma_fraction_floor=1e-7)
# (e) Realistic figures: flow meters 1 %, analysers 1 % of reading, floor
# 0.02 mol% (the defaults of a reactor's [reconcile] section).
SIGMA_PLANT = dict(sigma_flow_pct=1.0, sigma_fraction_pct=1.0, sigma_fraction_floor=2e-4)

# ---------------------------------------------------------------- cases

# feed: relative moles of the wet inlet; flow: the inlet's total wet flow, kmol/h.
# stand_in: a species that must not react (CH4 on a shift or methanol catalyst,
# where only kinetics keep it unconverted) is replaced in Cantera's phase by He
# with the same moles (He can do nothing but dilute, as an inert does; its moles
# come out unchanged and are mapped back to CH4). gross: the outlet component
# read 20 % high in check (e), one that carries a good share of an element.
# All feeds are invented; temperatures and pressures are typical of each duty
# (common practice).
CASES = [
    dict(label="steam reformer 800 degC 30 bar, S/C 3",
         species=["CH4", "H2O", "CO", "CO2", "H2", "N2"],
         feed={"CH4": 25.0, "H2O": 75.0, "H2": 2.0, "N2": 0.5, "CO2": 0.5},
         T=1073.15, P=30e5, flow=4000.0, gross="CO", sc=SC_REFORMER),
    dict(label="HTS 370 degC 30 bar",
         species=["CO", "H2O", "CO2", "H2", "N2", "He"], stand_in={"CH4": "He"},
         feed={"H2": 38.0, "CO": 8.0, "CO2": 5.5, "CH4": 2.5, "N2": 0.3, "H2O": 45.7},
         # Not CO: the HTS outlet holds ~1.4 mol% CO dry, and 20 % of that moves the
         # carbon balance by ~1.4 %, one sigma of two 1 % flow meters; no balance can
         # see it. CO2 (~20 mol% dry) 20 % high it can.
         T=643.15, P=30e5, flow=6000.0, gross="CO2"),
    dict(label="LTS 210 degC 29 bar",
         species=["CO", "H2O", "CO2", "H2", "N2", "Ar", "He"], stand_in={"CH4": "He"},
         feed={"H2": 45.0, "CO": 2.5, "CO2": 10.5, "CH4": 0.3, "N2": 14.0, "Ar": 0.2,
               "H2O": 27.5},
         T=483.15, P=29e5, flow=6000.0, gross="CO2"),
    dict(label="methanator 320 degC 28 bar",
         species=["CO", "CO2", "H2", "CH4", "H2O", "N2", "Ar"],
         feed={"H2": 74.0, "N2": 24.5, "CH4": 1.0, "CO": 0.3, "CO2": 0.1, "Ar": 0.3,
               "H2O": 0.1},
         T=593.15, P=28e5, flow=3000.0, gross="CH4"),
    dict(label="ammonia converter 450 degC 150 bar",
         species=["N2", "H2", "NH3", "Ar", "CH4"],
         feed={"N2": 22.0, "H2": 66.0, "NH3": 4.0, "Ar": 4.0, "CH4": 4.0},
         T=723.15, P=150e5, flow=20000.0, gross="NH3"),
    dict(label="methanol converter 250 degC 80 bar",
         species=["CO", "CO2", "H2", "CH3OH", "H2O", "N2", "He"], stand_in={"CH4": "He"},
         feed={"CO": 6.0, "CO2": 4.0, "H2": 70.0, "CH4": 10.0, "N2": 9.5, "H2O": 0.5},
         T=523.15, P=80e5, flow=10000.0, gross="CO2"),
]


def make_gas(names):
    return ct.Solution(thermo="ideal-gas", species=cantera_species(names))


def atoms_of(acct, moles):
    """Atom flows per element (Cantera element names) of {species: kmol/h}."""
    out = {}
    for name, n in moles.items():
        k = acct.species_index(name)
        for e in acct.element_names:
            a = acct.n_atoms(k, e)
            if a:
                out[e] = out.get(e, 0.0) + a * n
    return out


def equilibrium_streams(case):
    """Inlet and outlet molar flows, kmol/h, by species (real names), and a
    reference self-check: the worst |closure - 1| of Cantera's own element amounts."""
    stand_in = case.get("stand_in", {})
    back = {v: k for k, v in stand_in.items()}
    gas = make_gas(case["species"])
    total = sum(case["feed"].values())
    n_in = {k: case["flow"] * v / total for k, v in case["feed"].items()}
    gas.TPX = case["T"], case["P"], {stand_in.get(k, k): v for k, v in n_in.items()}
    try:
        gas.equilibrate("TP", solver="element_potential", rtol=1e-14, max_steps=10000)
    except ct.CanteraError:
        gas.equilibrate("TP", solver="gibbs", rtol=1e-14, max_steps=10000)
    x = {back.get(n, n): float(gas.X[i]) for i, n in enumerate(gas.species_names)}
    # Accounting phase with the real species: the element data of both streams.
    acct = make_gas(sorted(set(n_in) | set(x)))
    b_in = atoms_of(acct, n_in)
    per_kmol = atoms_of(acct, x)
    # Outlet total: as many atoms out as in (all elements together).
    n_total_out = sum(b_in.values()) / sum(per_kmol.values())
    n_out = {k: n_total_out * v for k, v in x.items()}
    b_out = atoms_of(acct, n_out)
    worst = max(abs(b_out[e] / b_in[e] - 1.0) for e in b_in)
    return n_in, n_out, acct, worst


def split(moles):
    """(dry flow, {species: dry fraction}, water or None) of {species: kmol/h}."""
    water = moles.get("H2O")
    dry = {k: v for k, v in moles.items() if k != "H2O" and v > 0.0}
    f = sum(dry.values())
    return f, {k: v / f for k, v in dry.items()}, water


def stream_json(moles, water_measured=True, gross=None):
    f, y, w = split(moles)
    if gross:
        y = dict(y)
        y[gross] *= 1.2
    s = {"dry_flow_kmol_h": f, "dry_mole_fractions": y}
    if w is not None:
        s["water_kmol_h"] = w if water_measured else "unmeasured"
    return s


def ref_atoms(acct, stream):
    """Atom flows of a stream as sent to eqwatch (dry fractions x dry flow + water)."""
    moles = {k: stream["dry_flow_kmol_h"] * y for k, y in stream["dry_mole_fractions"].items()}
    w = stream.get("water_kmol_h")
    if isinstance(w, float):
        moles["H2O"] = w
    return atoms_of(acct, moles)


def run_balance(run, doc, tmp):
    path = Path(tmp) / "balance.json"
    path.write_text(json.dumps(doc))
    return run("balance", "--input", str(path))


def by_element(rows):
    return {r["element"]: r for r in rows or []}


def check_case(tally, run, case, tmp):
    lab = case["label"]
    n_in, n_out, acct, worst = equilibrium_streams(case)
    tally.check(f"{{{lab}}} reference closure (Cantera element amounts)", worst <= 1e-12,
                f"worst |out/in - 1| {worst:.2e} tol 1e-12")
    inlet, outlet = stream_json(n_in), stream_json(n_out)

    # (a), (b), (c): everything measured, small sigma.
    try:
        out = run_balance(run, dict(inlet=inlet, outlet=outlet, **SIGMA_SMALL), tmp)
    except EqwatchError as e:
        tally.error(f"{{{lab}}} all measured", e)
        return
    els = by_element(out.get("elements_measured"))
    ref_in, ref_out = ref_atoms(acct, inlet), ref_atoms(acct, outlet)
    tally.check(f"{{{lab}}} (a) elements", sorted(els) == sorted(ref_in),
                f"eqwatch {sorted(els)} Cantera {sorted(ref_in)}")
    for e in sorted(ref_in):
        row = els.get(e, {})
        tally.close_rel(f"{{{lab}}} (a) {e} in", row.get("in_kmol_h"), ref_in[e], RTOL_ATOMS,
                        unit="kmol/h ")
        tally.close_rel(f"{{{lab}}} (a) {e} out", row.get("out_kmol_h"), ref_out.get(e, 0.0),
                        RTOL_ATOMS, unit="kmol/h ")
        tally.close_abs(f"{{{lab}}} (b) {e} closure", row.get("closure"), 1.0, TOL_CLOSURE)
    g = out.get("global_test") or {}
    tally.check(f"{{{lab}}} (c) global test passes", g.get("passed") is True,
                f"statistic {g.get('statistic')!r} dof {g.get('dof')!r} critical {g.get('critical')!r}")
    tally.close_abs(f"{{{lab}}} (c) global statistic", g.get("statistic"), 0.0, TOL_GAMMA)
    worst_adj, worst_tag = 0.0, None
    for est in out.get("estimates", []):
        if est.get("measured") is None:
            continue
        a = abs(est["measured"] - est["reconciled"]) / est["measurement_sigma"]
        if a >= worst_adj:
            worst_adj, worst_tag = a, est["tag"]
    tally.check(f"{{{lab}}} (c) adjustments", worst_adj <= TOL_ADJ_SIGMA,
                f"largest |adjustment|/sigma {worst_adj:.2e} ({worst_tag}) tol {TOL_ADJ_SIGMA:g}")
    tally.check(f"{{{lab}}} (c) no suspect", out.get("suspect") is None,
                f"suspect {out.get('suspect')!r}")

    # (d) outlet water unmeasured.
    _, _, w_ref = split(n_out)
    if w_ref is None:
        tally.check(f"{{{lab}}} (d) water", "water_kmol_h" not in outlet,
                    "no water in this case (no O in the feed): nothing to recover")
    else:
        try:
            out = run_balance(run, dict(inlet=inlet, outlet=stream_json(n_out, False),
                                        **SIGMA_SMALL), tmp)
        except EqwatchError as e:
            tally.error(f"{{{lab}}} outlet water unmeasured", e)
            return
        est = {x["tag"]: x for x in out.get("estimates", [])}
        h_out = ref_atoms(acct, outlet)["H"]
        rtol = TOL_CLOSURE * h_out / (2.0 * w_ref)
        tally.close_rel(f"{{{lab}}} (d) outlet water", est.get("outlet water", {}).get("reconciled"),
                        w_ref, rtol, unit="kmol/h ")
        f_dry = split(n_out)[0]
        sr = out.get("steam_ratios", {})
        tally.close_rel(f"{{{lab}}} (d) outlet steam/dry gas",
                        sr.get("outlet_steam_to_dry_gas_reconciled"), w_ref / f_dry, rtol)
        if case.get("sc"):
            for k in ("inlet_steam_to_carbon_measured", "inlet_steam_to_carbon_reconciled"):
                tally.close_rel(f"{{{lab}}} (d) {k}", sr.get(k), case["sc"], TOL_CLOSURE)

    # (e) one outlet component 20 % high, plant-like sigma.
    tag = f"outlet {case['gross']}"
    try:
        out = run_balance(run, dict(inlet=inlet, outlet=stream_json(n_out, gross=case["gross"]),
                                    **SIGMA_PLANT), tmp)
    except EqwatchError as e:
        tally.error(f"{{{lab}}} gross error", e)
        return
    g = out.get("global_test") or {}
    tally.check(f"{{{lab}}} (e) {tag} +20 %: global test fails", g.get("passed") is False,
                f"statistic {g.get('statistic')!r} critical {g.get('critical')!r} dof {g.get('dof')!r}")
    eq = out.get("suspect_equivalents") or []
    named = out.get("suspect") == tag or tag in eq
    z = {x["tag"]: x.get("z") for x in out.get("estimates", [])}
    tally.check(f"{{{lab}}} (e) {tag} +20 %: named", named,
                f"suspect {out.get('suspect')!r} equivalents {eq} (z of {tag} {z.get(tag)!r})")


def main():
    args = parse_args(__doc__.splitlines()[0])
    tally = Tally("balance")
    t0 = time.perf_counter()
    require_binary(args.bin, tally)
    run = Runner(args.bin, args.verbose)
    with tempfile.TemporaryDirectory() as tmp:
        for case in CASES:
            try:
                check_case(tally, run, case, tmp)
            except (ct.CanteraError, KeyError, ZeroDivisionError) as e:
                tally.error(f"{{{case['label']}}}", e)
    print(f"(elapsed {time.perf_counter() - t0:.1f} s; cantera {ct.__version__})")
    tally.finish()


if __name__ == "__main__":
    main()
