"""Cost of the spin-orbit couplings next to the response solve they come from.

Usage::

    OMP_NUM_THREADS=1 python benchmarks/soc_costs.py [--basis 6-31g*] [--roots 3] [--json FILE]

Acetone (10 atoms, embedded from SMILES by RDKit when it is installed, else the built-in
formaldehyde), CIS and TDA-B3LYP with singlet and triplet roots: wall time of
``Engine.states`` (SCF + singlet and triplet response) and of ``spin_orbit_couplings`` with
each operator, fastest of REPEATS, printed side by side as ratios. Nothing is asserted.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from importlib import resources

os.environ.setdefault("OMP_NUM_THREADS", "1")

import surfcross as sc  # noqa: E402
from surfcross.engine.pyscf_response import PySCFResponseEngine  # noqa: E402
from surfcross.engine.pyscf_soc import spin_orbit_couplings  # noqa: E402

REPEATS = 2
OPERATORS = ("effective-charge", "mean-field")


def _molecule() -> tuple[str, sc.Geometry]:
    try:
        from surfcross.io.smiles import geometry_from_smiles

        return "acetone", geometry_from_smiles("CC(=O)C")
    except Exception:  # RDKit missing: the built-in molecule
        path = resources.files("surfcross.data") / "formaldehyde.xyz"
        return "formaldehyde", sc.read_xyz(str(path))


def _fastest(call, repeats: int = REPEATS):
    best, value = float("inf"), None
    for _ in range(repeats):
        start = time.perf_counter()
        value = call()
        best = min(best, time.perf_counter() - start)
    return best, value


def measure(spec: sc.MethodSpec, geometry: sc.Geometry) -> dict:
    with PySCFResponseEngine(spec, warm_start=False) as engine:
        states_s, evaluation = _fastest(lambda: engine.states(geometry))
    row = {"method": f"{spec.method}/{spec.reference}/{spec.basis}", "states_s": states_s,
           "response_s": float(evaluation.timings_s.get("response", 0.0)),
           "pairs": None, "operators": {}}
    for operator in OPERATORS:
        seconds, soc = _fastest(lambda: spin_orbit_couplings(evaluation, operator, method=spec))
        row["pairs"] = len(soc.pairs)
        row["operators"][operator] = {"seconds": seconds, "ratio_to_states": seconds / states_s}
    return row


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--basis", default="6-31g*")
    parser.add_argument("--roots", type=int, default=3)
    parser.add_argument("--json", default=None)
    args = parser.parse_args(argv)
    import pyscf.tdscf  # noqa: F401  (import once before timing)

    name, geometry = _molecule()
    specs = [sc.MethodSpec(method="cis", basis=args.basis, roots=args.roots,
                           triplet_roots=args.roots),
             sc.MethodSpec(method="tda", xc="b3lyp", basis=args.basis, roots=args.roots,
                           triplet_roots=args.roots)]
    rows = [measure(spec, geometry) for spec in specs]
    print(f"{name} ({geometry.natom} atoms), {args.roots} singlet + {args.roots} triplet roots "
          f"asked (2 extra each), fastest of {REPEATS}")
    print(f"{'method':<24}{'states (s)':>12}{'operator':>18}{'SOC (s)':>10}{'SOC/states':>12}")
    for row in rows:
        for operator, r in row["operators"].items():
            print(f"{row['method']:<24}{row['states_s']:>12.2f}{operator:>18}"
                  f"{r['seconds']:>10.3f}{r['ratio_to_states']:>12.3f}")
    if args.json:
        with open(args.json, "w") as fh:
            json.dump({"molecule": name, "natom": geometry.natom, "rows": rows}, fh, indent=1)
    return 0


if __name__ == "__main__":
    sys.exit(main())
