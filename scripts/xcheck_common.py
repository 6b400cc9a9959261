"""Shared helpers for the eqwatch cross-check scripts in scripts/.

Not a test by itself. The cross-check scripts import it as a sibling module
(Python puts a script's own directory first on sys.path).
"""

import argparse
import functools
import json
import math
import subprocess
import sys
import tomllib
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]

# Standard-state pressure of eqwatch's K(T): 1 bar (see data/species.toml header).
P_STD_PA = 1.0e5


def parse_args(description):
    ap = argparse.ArgumentParser(description=description)
    ap.add_argument("--bin", required=True, help="path to the eqwatch binary")
    ap.add_argument("-v", "--verbose", action="store_true",
                    help="also print the eqwatch command lines")
    return ap.parse_args()


class EqwatchError(RuntimeError):
    pass


class Runner:
    """Runs the eqwatch binary and returns its --json output as a dict."""

    def __init__(self, binary, verbose=False):
        self.binary = str(binary)
        self.verbose = verbose

    def __call__(self, *args):
        cmd = [self.binary, *args, "--json"]
        if self.verbose:
            print("  $ " + " ".join(_quote(a) for a in cmd))
        try:
            p = subprocess.run(cmd, capture_output=True, text=True, timeout=60)
        except (OSError, subprocess.TimeoutExpired) as e:
            raise EqwatchError(f"could not run {cmd[0]}: {e}") from None
        if p.returncode != 0:
            raise EqwatchError(f"exit {p.returncode}: {p.stderr.strip()[:300]}")
        try:
            return json.loads(p.stdout)
        except json.JSONDecodeError as e:
            raise EqwatchError(f"stdout is not one JSON object ({e}): {p.stdout[:200]!r}") from None


def _quote(a):
    return a if a and all(c.isalnum() or c in "-_./=,%" for c in a) else repr(a)


class Tally:
    """Counts checks, prints one line per check and the final summary line."""

    def __init__(self, name):
        self.name = name
        self.passed = 0
        self.failed = 0

    def check(self, label, ok, detail):
        print(f"{'PASS' if ok else 'FAIL'} {label}: {detail}")
        if ok:
            self.passed += 1
        else:
            self.failed += 1
        return ok

    def error(self, label, exc):
        """A case that could not be evaluated at all counts as one failure."""
        return self.check(label, False, f"error: {exc}")

    def close_abs(self, label, got, ref, tol, unit="", who="eqwatch"):
        ok = _finite(got) and abs(got - ref) <= tol
        d = got - ref if _finite(got) else float("nan")
        return self.check(label, ok, f"{who} {got!r} ref {ref!r} diff {d:.3e} {unit}tol {tol:g} abs")

    def close_rel(self, label, got, ref, rtol, atol=0.0, unit="", who="eqwatch"):
        ok = _finite(got) and abs(got - ref) <= max(rtol * abs(ref), atol)
        d = (got - ref) / ref if _finite(got) and ref != 0 else float("nan")
        extra = f" or abs {atol:g}" if atol else ""
        return self.check(label, ok,
                          f"{who} {got!r} ref {ref!r} rel.diff {d:.3e} {unit}tol {rtol:g} rel{extra}")

    def finish(self):
        print(f"crosscheck-{self.name}: {self.passed} passed, {self.failed} failed")
        sys.exit(1 if self.failed else 0)


def _finite(x):
    return isinstance(x, (int, float)) and not isinstance(x, bool) and math.isfinite(x)


def require_binary(binary, tally):
    p = Path(binary)
    if not p.is_file():
        tally.check("binary", False, f"{binary} does not exist")
        tally.finish()


def load_species_toml():
    """The built-in species file, keyed by eqwatch species name."""
    doc = tomllib.loads((REPO / "data" / "species.toml").read_text())
    return {s["name"]: s for s in doc["species"]}


def parse_reaction(text):
    """'CH4 + H2O = CO + 3 H2' -> {'CH4': -1, 'H2O': -1, 'CO': 1, 'H2': 3}."""
    left, right = text.split("=")
    nu = {}
    for side, sign in ((left, -1.0), (right, 1.0)):
        for term in side.split(" + "):
            parts = term.split()
            coef, name = (float(parts[0]), parts[1]) if len(parts) == 2 else (1.0, parts[0])
            nu[name] = nu.get(name, 0.0) + sign * coef
    return nu


# eqwatch names that differ from the species names in cantera's nasa_gas.yaml
# (same mapping as tools/gen_species.py).
CANTERA_NAME = {"HCl": "HCL", "Cl2": "CL2", "CH2O": "HCHO,formaldehy"}


def cantera_species(names):
    """Cantera Species objects for eqwatch `names`, from nasa_gas.yaml, with the
    reference pressure set to 1 bar.

    nasa_gas.yaml declares no reference pressure, so Cantera would label the
    data as 1 atm; the data are really at 1 bar (see data/species.toml header),
    which is also eqwatch's standard state. Labelling them 1 bar changes no
    g(T), h(T), s(T) value but makes Cantera's chemical potentials
    mu = g(T) + RT ln(y P / P_ref) use the same P_ref = 1 bar as eqwatch."""
    import cantera as ct
    all_sp = _nasa_gas_species()
    out = []
    for n in names:
        d = all_sp[CANTERA_NAME.get(n, n)].input_data
        d["name"] = n
        d["thermo"]["reference-pressure"] = P_STD_PA
        out.append(ct.Species.from_dict(d))
    return out


@functools.lru_cache(maxsize=1)
def _nasa_gas_species():
    import cantera as ct
    return {s.name: s for s in ct.Species.list_from_file("nasa_gas.yaml")}
