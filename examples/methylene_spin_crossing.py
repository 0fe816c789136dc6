"""Singlet/triplet crossing of methylene with a high-spin triplet reference (Python API).

Scenario (invented): before screening carbene-releasing photoinitiators, the bench checks its
spin-crossing setup on the smallest carbene. CH2 has a bent closed-shell singlet (S0) and a
wider-angle triplet ground state (T1, here a separate high-spin UHF calculation, not a
response state). The script finds both minima and the minimum-energy crossing point between
them, and reports the H-C-H angles.

    python examples/methylene_spin_crossing.py [--out DIR] [--xc b3lyp]

Hartree-Fock (the default, fast) over-stabilizes the triplet relative to the singlet, which
moves the crossing; a functional (--xc b3lyp) or, better, a correlated multireference method
is needed before trusting the numbers.
"""

from __future__ import annotations

import argparse
import math
import sys

import surfcross as sc
from surfcross.io.run import RunDirectory
from surfcross.units import BOHR_IN_ANGSTROM, HARTREE_IN_EV


def methylene(angle_deg: float, r_ch: float = 1.09) -> sc.Geometry:
    """CH2 in the yz plane with the given H-C-H angle (C-H in angstrom)."""
    half = math.radians(angle_deg / 2)
    y, z = r_ch * math.sin(half), r_ch * math.cos(half)
    return sc.Geometry.from_angstrom(["C", "H", "H"], [[0, 0, 0], [0, y, z], [0, -y, z]])


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default="methylene_spin_crossing", help="folder for the runs")
    parser.add_argument("--xc", default=None, help="functional (default: Hartree-Fock)")
    args = parser.parse_args(argv)

    method = sc.MethodSpec(method="tda", xc=args.xc, basis="6-31g", triplets="high-spin")
    top = RunDirectory.create(args.out)
    start = methylene(115.0)
    runs = {
        "S0 minimum": sc.relax(start, "S0", method, run_dir=top.child("s0_min"), progress=False),
        "T1 minimum": sc.relax(start, "T1", method, run_dir=top.child("t1_min"), progress=False),
        "S0/T1 crossing": sc.find_crossing(start, ["S0", "T1"], method,
                                           run_dir=top.child("s0_t1_crossing"), progress=False),
    }
    print(f"methylene, {'HF' if args.xc is None else args.xc}/6-31G, high-spin triplet")
    for name, run in runs.items():
        g = run.geometry
        energies = ", ".join(f"E({k}) = {v:.6f} Eh" for k, v in run.energies_eh.items())
        state = "converged" if run.converged else f"NOT converged ({run.status})"
        print(f"  {name:15s} {state}: H-C-H {g.angle(1, 0, 2):6.1f} deg, "
              f"r(C-H) {g.distance(0, 1) * BOHR_IN_ANGSTROM:.3f} A, {energies}")
    s0, t1 = runs["S0 minimum"].energies_eh["S0"], runs["T1 minimum"].energies_eh["T1"]
    x = runs["S0/T1 crossing"].energies_eh["S0"]
    print(f"  singlet-triplet gap (minima): {(s0 - t1) * HARTREE_IN_EV:.2f} eV; crossing "
          f"{(x - s0) * HARTREE_IN_EV:.2f} eV above the singlet minimum")
    print(f"  records: {top.path}")
    print("  caution: the gap and the crossing depend strongly on the method; check them with "
          "a correlated multireference method")
    return 0 if all(r.converged for r in runs.values()) else 1


if __name__ == "__main__":
    sys.exit(main())
