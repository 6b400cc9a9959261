#!/usr/bin/env python3
"""Generate eqwatch's species data files from reference packages.

Writes (paths relative to the repository root):

* ``data/species.toml``          built-in species, NASA 7-coefficient fits
                                 transcribed from ``nasa_gas.yaml`` (cantera wheel)
* ``config/species-nasa9.toml``  example user species file, NASA 9-coefficient
                                 fits transcribed from ``airNASA9.yaml`` (cantera wheel)

Critical constants (Tc, Pc, omega) come from the ``chemicals`` package, looked
up by CAS number with that package's default (first-listed) method, i.e. the
values ``thermo`` uses by default when it builds a Peng-Robinson mixture.

Usage (from the repository root, with the project venv):

    .venv/bin/python tools/gen_species.py          # write both files
    .venv/bin/python tools/gen_species.py --check  # only verify files are up to date

The script verifies its own output: every written file is parsed back with
tomllib and each coefficient is compared bit-for-bit with what Cantera itself
loads from the same YAML file, and the NASA 9 coefficient ordering is checked
numerically against Cantera's cp, h and s.
"""

import argparse
import math
import sys
import tomllib
from pathlib import Path

import cantera as ct
import chemicals
from chemicals import acentric, critical
from chemicals.identifiers import search_chemical
from ruamel.yaml import YAML

REPO = Path(__file__).resolve().parents[1]
GENERATOR = "tools/gen_species.py"

# Gas constant used only for the self-checks below (CODATA 2018 exact value).
R = 8.314462618

# eqwatch name -> (name in cantera's nasa_gas.yaml, CAS number).
# CAS numbers are checked against the chemicals database formula below.
SPECIES = [
    ("H2", "H2", "1333-74-0"),
    ("N2", "N2", "7727-37-9"),
    ("O2", "O2", "7782-44-7"),
    ("Ar", "Ar", "7440-37-1"),
    ("He", "He", "7440-59-7"),
    ("H2O", "H2O", "7732-18-5"),
    ("CO", "CO", "630-08-0"),
    ("CO2", "CO2", "124-38-9"),
    ("CH4", "CH4", "74-82-8"),
    ("C2H6", "C2H6", "74-84-0"),
    ("C2H4", "C2H4", "74-85-1"),
    ("C3H8", "C3H8", "74-98-6"),
    ("CH3OH", "CH3OH", "67-56-1"),
    ("CH3OCH3", "CH3OCH3", "115-10-6"),
    ("NH3", "NH3", "7664-41-7"),
    ("NO", "NO", "10102-43-9"),
    ("NO2", "NO2", "10102-44-0"),
    ("N2O", "N2O", "10024-97-2"),
    ("SO2", "SO2", "7446-09-5"),
    ("SO3", "SO3", "7446-11-9"),
    ("H2S", "H2S", "7783-06-4"),
    ("COS", "COS", "463-58-1"),
    ("HCl", "HCL", "7647-01-0"),
    ("Cl2", "CL2", "7782-50-5"),
    ("HCN", "HCN", "74-90-8"),
    ("CH2O", "HCHO,formaldehy", "50-00-0"),
]

# Original publications behind the chemicals method keys that can be selected
# (taken from the docstrings of chemicals.critical.Tc / Pc and acentric.omega).
METHOD_CITATIONS = {
    "HEOS": "Huber, Lemmon, Bell & McLinden, Ind. Eng. Chem. Res. 61 (2022) 15449 "
            "(REFPROP reference equations of state)",
    "IUPAC": "IUPAC series 'Vapor-Liquid Critical Properties of Elements and "
             "Compounds', J. Chem. Eng. Data (1995-2015)",
    "MATTHEWS": "Mathews, Chem. Rev. 72 (1972) 71",
    "PSRK": "Horstmann et al., Fluid Phase Equilib. 227 (2005) 157",
    "CRC": "CRC Handbook of Chemistry and Physics, 95th ed. (2014)",
    "PD": "Passut & Danner, Ind. Eng. Chem. Process Des. Dev. 12 (1973) 365",
    "YAWS": "Yaws, Thermophysical Properties of Chemicals and Hydrocarbons, 2nd ed. (2014)",
    "WEBBOOK": "NIST Chemistry WebBook",
    "PINAMARTINES": "Pina-Martinez, Privat & Jaubert, AIChE J. (2021) e17518",
}

NASA7_CITATION = "McBride, Gordon & Reno, NASA TM-4513 (1993), 7-coefficient fit"
NASA9_CITATION = ("McBride, Zehe & Gordon, NASA TP-2002-211556 (2002), "
                  "9-coefficient fit")


def cantera_data_file(name):
    for d in ct.get_data_directories():
        p = Path(d) / name
        if p.is_file():
            return p
    raise SystemExit(f"{name} not found in cantera data directories")


def load_yaml_species(path):
    doc = YAML(typ="safe", pure=True).load(path.read_text())
    by_name = {}
    for sp in doc["species"]:
        by_name[sp["name"]] = sp
    return doc, by_name


def fmt_float(x):
    """TOML float literal that round-trips to exactly the same double."""
    x = float(x)
    if not math.isfinite(x):
        raise ValueError(f"non-finite coefficient {x}")
    s = repr(x)
    assert float(s) == x
    return s


def fmt_elements(comp):
    parts = []
    for el, n in comp.items():
        n = float(n)
        if n != int(n) or n <= 0:
            raise ValueError(f"non-integer or non-positive element count {el}={n}")
        parts.append(f"{el} = {int(n)}")
    return "{ " + ", ".join(parts) + " }"


def method_of(func, methods_func, cas):
    """Return (value, method name) for chemicals' default lookup of `cas`.

    The default call func(cas) returns the first available source in the
    package's priority order; we identify its name as the first listed method
    whose value is identical, and insist that this is also the first-listed
    method (so the recorded name really is the default one)."""
    value = func(cas)
    if value is None:
        return None, None
    methods = methods_func(cas)
    for m in methods:
        if func(cas, method=m) == value:
            if m != methods[0]:
                raise SystemExit(f"{cas}: default value matches {m}, not first method {methods[0]}")
            return float(value), m
    raise SystemExit(f"{cas}: could not identify chemicals method for {value}")


def critical_block(cas):
    tc, m_tc = method_of(critical.Tc, critical.Tc_methods, cas)
    pc, m_pc = method_of(critical.Pc, critical.Pc_methods, cas)
    om, m_om = method_of(acentric.omega, acentric.omega_methods, cas)
    if tc is None or pc is None or om is None:
        return None, None
    cites = []
    for m in dict.fromkeys([m_tc, m_pc, m_om]):
        cites.append(f"{m} = {METHOD_CITATIONS.get(m, 'see chemicals docs')}")
    src = (f"chemicals {chemicals.__version__} (PyPI) default methods: Tc {m_tc}, "
           f"Pc {m_pc}, omega {m_om}; " + "; ".join(cites))
    lines = [
        "[species.critical]",
        f"tc_k = {fmt_float(tc)}",
        f"pc_bar = {fmt_float(pc / 1e5)}",
        f"omega = {fmt_float(om)}",
        f"source = {toml_str(src)}",
    ]
    return lines, (tc, pc, om)


def toml_str(s):
    assert '"' not in s and "\\" not in s and "\n" not in s
    return f'"{s}"'


def species_block(name, ct_name, cas, entry, model, file_label, citation, ref_bar):
    thermo = entry["thermo"]
    if thermo["model"] != model:
        raise SystemExit(f"{ct_name}: model {thermo['model']} != {model}")
    if "reference-pressure" in thermo:
        raise SystemExit(f"{ct_name}: has an explicit reference-pressure; revisit header text")
    ranges = [float(t) for t in thermo["temperature-ranges"]]
    data = thermo["data"]
    if len(data) != len(ranges) - 1:
        raise SystemExit(f"{ct_name}: {len(data)} data sets for {len(ranges)} range bounds")
    ncoef = 7 if model == "NASA7" else 9
    key = "nasa7" if model == "NASA7" else "nasa9"
    out = []
    out.append(f"# {name}: cantera species name {ct_name!r} in {file_label}; "
               f"NASA data note {str(entry['thermo'].get('note', entry.get('note', ''))).strip()!r}; CAS {cas}")
    out.append("[[species]]")
    out.append(f"name = {toml_str(name)}")
    out.append(f"elements = {fmt_elements(entry['composition'])}")
    out.append(f"source = {toml_str(f'{citation}; transcribed from {file_label} in cantera {ct.__version__} (PyPI)')}")
    out.append(f"reference_pressure_bar = {fmt_float(ref_bar)}")
    for i, coeffs in enumerate(data):
        if len(coeffs) != ncoef:
            raise SystemExit(f"{ct_name}: range {i} has {len(coeffs)} coefficients")
        out.append("")
        out.append(f"[[species.{key}]]")
        out.append(f"t_min_k = {fmt_float(ranges[i])}")
        out.append(f"t_max_k = {fmt_float(ranges[i + 1])}")
        out.append("coefficients = [" + ", ".join(fmt_float(c) for c in coeffs) + "]")
    crit_lines, crit = critical_block(cas)
    if crit_lines:
        out.append("")
        out.extend(crit_lines)
    out.append("")
    return out, crit


def check_cas(name, cas, comp):
    meta = search_chemical(cas)
    # chemicals writes formulas in Hill order; compare element counts instead.
    from chemicals.elements import simple_formula_parser
    counts = {k: int(v) for k, v in simple_formula_parser(meta.formula).items()}
    mine = {k: int(float(v)) for k, v in comp.items()}
    if counts != mine:
        raise SystemExit(f"{name}: CAS {cas} is {meta.formula}, expected {mine}")


# ---------------------------------------------------------------- self checks

def s298_check(species_dict, model, label):
    """Evidence for the standard-state pressure of the data: the absolute
    entropy of N2 at 298.15 K.  CODATA Key Values (Cox, Wagman & Medvedev,
    1989) give S(N2, 298.15 K, 1 bar) = 191.609 J/(mol K); at 1 atm it would be
    R ln(1.01325) = 0.1094 J/(mol K) lower, 191.500.  Whichever the polynomial
    reproduces (to 0.01) is the pressure the data are really at."""
    sp = ct.Species.from_dict(species_dict)
    s = sp.thermo.s(298.15) / 1000.0
    if abs(s - 191.609) < 0.01:
        return 1.0, s
    if abs(s - 191.500) < 0.01:
        return 1.01325, s
    raise SystemExit(f"{label}: N2 S298 = {s}, matches neither 1 bar nor 1 atm")


def nasa9_order_check(entry):
    """Verify that a YAML NASA9 data list is [a1..a7, b1, b2] in the
    convention of NASA TP-2002-211556 eq. (1)-(3), by evaluating those
    equations and comparing with Cantera's own cp, h, s for the species."""
    sp = ct.Species.from_dict(entry)
    ranges = entry["thermo"]["temperature-ranges"]
    worst = 0.0
    for i, a in enumerate(entry["thermo"]["data"]):
        lo, hi = ranges[i], ranges[i + 1]
        for T in (lo + 0.1 * (hi - lo), 0.5 * (lo + hi), lo + 0.9 * (hi - lo)):
            cp = (a[0] / T**2 + a[1] / T + a[2] + a[3] * T + a[4] * T**2
                  + a[5] * T**3 + a[6] * T**4)
            h = (-a[0] / T**2 + a[1] * math.log(T) / T + a[2] + a[3] * T / 2
                 + a[4] * T**2 / 3 + a[5] * T**3 / 4 + a[6] * T**4 / 5 + a[7] / T)
            s = (-a[0] / T**2 / 2 - a[1] / T + a[2] * math.log(T) + a[3] * T
                 + a[4] * T**2 / 2 + a[5] * T**3 / 3 + a[6] * T**4 / 4 + a[8])
            RT = ct.gas_constant * T  # Cantera's R (J/kmol/K); ratios are unitless
            got = (sp.thermo.cp(T) / ct.gas_constant, sp.thermo.h(T) / RT,
                   sp.thermo.s(T) / ct.gas_constant)
            for mine, theirs in zip((cp, h, s), got):
                worst = max(worst, abs(mine - theirs) / max(1.0, abs(theirs)))
    # 1e-9: both sides evaluate the same polynomial in double precision.
    if worst > 1e-9:
        raise SystemExit(f"{entry['name']}: NASA9 order check failed ({worst:.3e})")
    return worst


def verify_written(path, key, yaml_by_name, expected):
    doc = tomllib.loads(path.read_text())
    assert set(doc) == {"species"}, set(doc)
    names = [s["name"] for s in doc["species"]]
    assert names == [e[0] for e in expected], names
    for sp, (name, ct_name, cas, crit) in zip(doc["species"], expected):
        entry = yaml_by_name[ct_name]
        # Compare with what Cantera itself loads for the species.
        ctsp = ct.Species.from_dict(entry)
        ranges = entry["thermo"]["temperature-ranges"]
        blocks = sp[key]
        assert len(blocks) == len(entry["thermo"]["data"])
        for i, b in enumerate(blocks):
            assert b["t_min_k"] == ranges[i] and b["t_max_k"] == ranges[i + 1]
            assert b["coefficients"] == [float(c) for c in entry["thermo"]["data"][i]]
        if key == "nasa7":
            # Cantera NASA7 coeffs: [Tmid, high-range a1..a7, low-range a1..a7]
            # (single-range species are stored as two identical ranges).
            c = list(ctsp.thermo.coeffs)
            low, high = blocks[0]["coefficients"], blocks[-1]["coefficients"]
            assert c[8:15] == low and c[1:8] == high, name
        else:
            # Cantera NASA9: [nreg, (Tmin, Tmax, 9 coeffs) per region]
            c = list(ctsp.thermo.coeffs)
            assert int(c[0]) == len(blocks)
            for i, b in enumerate(blocks):
                seg = c[1 + 11 * i: 1 + 11 * (i + 1)]
                assert seg[0] == b["t_min_k"] and seg[1] == b["t_max_k"]
                assert seg[2:] == b["coefficients"], name
        assert sp["elements"] == {k: int(float(v)) for k, v in entry["composition"].items()}
        if crit is None:
            assert "critical" not in sp, name
        else:
            tc, pc, om = crit
            cr = sp["critical"]
            # Identical to chemicals' defaults: Tc and omega exactly; Pc after
            # the Pa -> bar division, so allow the last-bit rounding of x/1e5*1e5.
            assert cr["tc_k"] == critical.Tc(cas) and cr["omega"] == acentric.omega(cas)
            assert abs(cr["pc_bar"] * 1e5 - critical.Pc(cas)) <= 1e-12 * critical.Pc(cas)
    return len(names)


def header(kind, file_label, ref_bar, s298, citation, extra):
    ref_note = ("1 bar" if ref_bar == 1.0 else "1 atm")
    lines = [
        f"# eqwatch species data: {kind}.",
        f"# GENERATED by {GENERATOR}; do not edit by hand, re-run the generator.",
        f"# Thermodynamic data: {citation},",
        f"#   transcribed from {file_label} shipped in the cantera {ct.__version__} wheel (PyPI).",
        f"# Critical constants: chemicals {chemicals.__version__} (PyPI), default (first-listed)",
        "#   method per property, looked up by CAS number; these are the values thermo uses",
        "#   by default for Peng-Robinson. Pc converted from Pa to bar by dividing by 1e5.",
        "#",
        "# Standard-state pressure: the YAML file declares no `reference-pressure` (neither per",
        "#   species nor file-wide), so Cantera reads the data as if at its default of 1 atm",
        "#   (101325 Pa). The NASA Glenn data are, however, tabulated for a standard state of",
        "#   1 bar, and the numbers confirm it: the file's N2 polynomial gives",
        f"#   S(298.15 K) = {s298:.4f} J/(mol K); CODATA (Cox, Wagman & Medvedev 1989) gives",
        "#   191.609 at 1 bar and 191.500 at 1 atm. Hence reference_pressure_bar below is",
        f"#   {ref_note}, the pressure the data really are at.",
    ]
    lines += extra
    lines.append("")
    return lines


def build(check_only):
    # ---- NASA 7: data/species.toml
    path7 = cantera_data_file("nasa_gas.yaml")
    doc7, by7 = load_yaml_species(path7)
    if "reference-pressure" in str(doc7.get("units", "")):
        raise SystemExit("nasa_gas.yaml declares a reference pressure; revisit")
    ref7, s7 = s298_check(by7["N2"], "NASA7", "nasa_gas.yaml")
    body, expected7, missing = [], [], []
    for name, ct_name, cas in SPECIES:
        if ct_name not in by7:
            missing.append(name)
            continue
        check_cas(name, cas, by7[ct_name]["composition"])
        blk, crit = species_block(name, ct_name, cas, by7[ct_name], "NASA7", "nasa_gas.yaml",
                                  NASA7_CITATION, ref7)
        body += blk
        expected7.append((name, ct_name, cas, crit))
    text7 = "\n".join(header(
        "built-in species (NASA 7-coefficient polynomials + critical constants)",
        "nasa_gas.yaml", ref7, s7, "McBride, Gordon & Reno, NASA TM-4513 (1993)",
        ["#",
         "# Each [[species.nasa7]] block: cp/R = a1 + a2 T + a3 T^2 + a4 T^3 + a5 T^4,",
         "#   a6 = integration constant of H/R, a7 = integration constant of S/R; low range first.",
         "# Species whose cantera name differs: HCl <- 'HCL', Cl2 <- 'CL2', CH2O <- 'HCHO,formaldehy'.",
         "# SO2, SO3, H2S, COS, HCl are older JANAF-based fits (notes 'J ...', range 300-5000 K);",
         "#   their S(298.15 K) also agrees with the 1 bar JANAF values (Chase, JANAF 4th ed. 1998)",
         "#   to within 0.02 J/(mol K), far less than the 0.109 a 1 atm basis would imply.",
         ]) + body)

    # ---- NASA 9: config/species-nasa9.toml
    path9 = cantera_data_file("airNASA9.yaml")
    doc9, by9 = load_yaml_species(path9)
    ref9, s9 = s298_check(by9["N2"], "NASA9", "airNASA9.yaml")
    body9, expected9 = [], []
    for name, _, cas in SPECIES:
        ct_name = name  # airNASA9.yaml uses the same names for the species it has
        if ct_name not in by9 or by9[ct_name]["thermo"]["model"] != "NASA9":
            continue
        check_cas(name, cas, by9[ct_name]["composition"])
        nasa9_order_check(by9[ct_name])
        blk, crit = species_block(name, ct_name, cas, by9[ct_name], "NASA9", "airNASA9.yaml",
                                  NASA9_CITATION, ref9)
        body9 += blk
        expected9.append((name, ct_name, cas, crit))
    text9 = "\n".join(header(
        "EXAMPLE user species file in the NASA 9-coefficient format",
        "airNASA9.yaml", ref9, s9, "McBride, Zehe & Gordon, NASA TP-2002-211556 (2002)",
        ["#",
         "# This file demonstrates the 9-coefficient format. Species here carry the same names",
         "#   as eqwatch's built-ins, so loading this file overrides those built-ins by name.",
         "# Each [[species.nasa9]] block: coefficients = [a1..a7, b1, b2] in the order of",
         "#   NASA TP-2002-211556: cp/R = a1 T^-2 + a2 T^-1 + a3 + a4 T + a5 T^2 + a6 T^3 + a7 T^4,",
         "#   b1 = integration constant of H/R, b2 = integration constant of S/R.",
         "#   (Order verified by evaluating these formulas against Cantera's cp, h and s.)",
         "# Only N2, O2 and NO of eqwatch's built-in list are present in airNASA9.yaml, the only",
         f"#   gas-phase NASA9 file in the cantera {ct.__version__} wheel.",
         ]) + body9)

    out7 = REPO / "data" / "species.toml"
    out9 = REPO / "config" / "species-nasa9.toml"
    status = 0
    for out, text in ((out7, text7), (out9, text9)):
        if check_only:
            if not out.exists() or out.read_text() != text:
                print(f"{out.relative_to(REPO)} is out of date")
                status = 1
        else:
            out.parent.mkdir(parents=True, exist_ok=True)
            out.write_text(text)
            print(f"wrote {out.relative_to(REPO)}")
    if status == 0:
        n7 = verify_written(out7, "nasa7", by7, expected7)
        n9 = verify_written(out9, "nasa9", by9, expected9)
        print(f"verified {n7} NASA7 species, {n9} NASA9 species; "
              f"reference pressure {ref7} bar / {ref9} bar")
    if missing:
        print("MISSING from nasa_gas.yaml: " + ", ".join(missing))
        status = 1
    return status


def main():
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--check", action="store_true",
                    help="do not write; fail if the files differ from what would be generated")
    args = ap.parse_args()
    sys.exit(build(args.check))


if __name__ == "__main__":
    main()
