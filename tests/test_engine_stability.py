"""Cold-started unrestricted references are checked for internal instabilities.

Reference library: PySCF's UHF with its own internal stability analysis, followed by hand.
Case: methylene's high-spin (M_S = 1) triplet at a strongly bent geometry (60 degrees), where a
default-guess UHF converges to an excited SCF solution about 0.08 Eh above the stable one.
"""

import numpy as np
from pyscf import gto, scf

from surfcross import Geometry, MethodSpec, make_engine


def _ch2(angle_deg=60.0, r=1.1):
    t = np.radians(angle_deg)
    return Geometry.from_angstrom(
        ["C", "H", "H"], [[0, 0, 0], [r * np.sin(t / 2), 0, r * np.cos(t / 2)],
                          [-r * np.sin(t / 2), 0, r * np.cos(t / 2)]])


def _stable_uhf_energy(geom):
    mol = gto.M(atom=[(s, c) for s, c in zip(geom.symbols, geom.coords_bohr)], unit="Bohr",
                basis="sto-3g", spin=2, verbose=0)
    mf = scf.UHF(mol).run(conv_tol=1e-10)
    first = mf.e_tot
    for _ in range(3):
        mo = mf.stability(external=False)[0]
        if np.allclose(mo, mf.mo_coeff, atol=1e-6):
            break
        mf.kernel(mf.make_rdm1(mo, mf.mo_occ))
    return first, mf.e_tot


def test_high_spin_reference_is_the_stable_solution():
    geom = _ch2()
    first, stable = _stable_uhf_energy(geom)
    assert stable < first - 1e-3  # the case really has an unstable default solution
    engine = make_engine(MethodSpec(method="cis", basis="sto-3g", roots=1, triplet_roots=1,
                                    triplets="high-spin"))
    energy = engine.states(geom).energy("T1")
    assert abs(energy - stable) < 1e-7
