"""Carbonyl fragment screen (Python API): S1 minimum, then the S1/T1 crossing next to it.

Scenario (invented): the photostability bench of a small UV-filter start-up screens the
chromophore fragments of its candidate molecules. For a carbonyl fragment they want to know
where the first excited singlet relaxes and how far above that minimum the singlet meets a
triplet (a place where intersystem crossing can happen). Formaldehyde stands in for the
carbonyl fragment so the script runs in well under a minute.

    python examples/carbonyl_screen.py [--out DIR]

CIS/STO-3G is a demonstration level: check any number you care about with a larger basis and
a higher-level (e.g. multireference) method.
"""

from __future__ import annotations

import argparse
import sys

import numpy as np

import surfcross as sc
from surfcross.data import example_geometry
from surfcross.io.run import RunDirectory
from surfcross.units import ANGSTROM_IN_BOHR, BOHR_IN_ANGSTROM, HARTREE_IN_EV


def start_geometry() -> sc.Geometry:
    """Built-in formaldehyde with both H moved 0.06 angstrom out of the plane (x): a planar
    start would stay on the planar S1 saddle point."""
    mol = example_geometry("formaldehyde")
    coords = np.array(mol.coords_bohr)
    coords[2:, 0] += 0.06 * ANGSTROM_IN_BOHR
    return mol.with_coords(coords)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--out", default="carbonyl_screen", help="folder for the two runs")
    args = parser.parse_args(argv)

    top = RunDirectory.create(args.out)
    method = sc.MethodSpec(method="cis", basis="sto-3g")
    mol = start_geometry()

    s1 = sc.relax(mol, "S1", method, run_dir=top.child("s1_minimum"), progress=False)
    if not s1.converged:
        print(f"S1 minimization did not converge ({s1.status}); see {s1.run_dir}")
        return 1
    cross = sc.find_crossing(s1.geometry, ["S1", "T1"], method,
                             run_dir=top.child("s1_t1_crossing"), progress=False)

    e_min = s1.energies_eh["S1"]
    e_cross = float(np.mean(list(cross.energies_eh.values())))
    r_co = s1.geometry.distance(0, 1) * BOHR_IN_ANGSTROM
    print("carbonyl fragment (formaldehyde), CIS/STO-3G")
    print(f"  S1 minimum: E = {e_min:.6f} Eh, r(C-O) = {r_co:.3f} A ({s1.iterations} steps)")
    status = "converged" if cross.converged else f"NOT converged ({cross.status})"
    print(f"  S1/T1 crossing: {status}, gap {cross.data['gap_ev']:.1e} eV, "
          f"{(e_cross - e_min) * HARTREE_IN_EV:.2f} eV above the S1 minimum")
    print(f"  records: {top.path}")
    print("  caution: minimal basis and single-reference CIS; no spin-orbit coupling, so this "
          "says where intersystem crossing may happen, not how fast")
    return 0 if cross.converged else 1


if __name__ == "__main__":
    sys.exit(main())
