"""Interstate coupling vectors h = (E_J - E_I) <Psi_I|grad Psi_J> of the CASSCF engine.

Check (outside the engine's own coupling code): the derivative coupling is the derivative of
the wavefunction overlap, d_IJ = d/dR' <Psi_I(R)|Psi_J(R')> at R' = R (definition, common
practice). We take central differences of the exact CI-vector overlaps (AO cross overlaps
included) and compare (E_J - E_I) times that with PySCF's analytic coupling as stored by the
engine. This also fixes the sign convention documented in COUPLING_CONVENTION.
"""

import numpy as np
import pytest

from surfcross.engine.base import MethodSpec
from surfcross.engine.casscf import CASSCFEngine
from surfcross.errors import InputError
from surfcross.geometry import Geometry
from surfcross.states import parse_state

pytestmark = pytest.mark.pyscf

pytest.importorskip("pyscf")

# our own distorted ethylene (angstrom): no symmetry, S0/S1 well separated (~6 eV)
_ETHYLENE = np.array([
    [0.000, 0.000, 0.667], [0.000, 0.000, -0.667],
    [0.100, 0.922, 1.240], [-0.300, -0.900, 1.230],
    [0.920, 0.200, -1.130], [-0.920, 0.000, -1.230],
])
_S0, _S1 = parse_state("S0"), parse_state("S1")


def _geometry() -> Geometry:
    return Geometry.from_angstrom(["C", "C", "H", "H", "H", "H"], _ETHYLENE)


def _aligned_overlap(engine, ref, geometry, i, j):
    """<Psi_i(ref)|Psi_j(geometry)> with the phase of Psi_j aligned to ref."""
    other = engine.states(geometry)
    o = engine.overlaps(ref, other)["S"]
    return o[i, j] * np.sign(o[j, j])


def test_coupling_vector_matches_finite_difference_of_ci_overlaps():
    geom = _geometry()
    with CASSCFEngine(MethodSpec(method="casscf", basis="sto-3g", roots=1,
                                 active_space=(2, 2))) as engine:
        ref = engine.gradients(engine.states(geom), [], couplings=[(_S0, _S1)])
        h = ref.couplings[(_S0, _S1)]
        gap = ref.energy("S1") - ref.energy("S0")
        step = 1e-3  # bohr
        for atom, axis in [(0, 2), (2, 0), (3, 1), (4, 2)]:
            vals = []
            for sign in (1, -1):
                c = geom.coords_bohr.copy()
                c[atom, axis] += sign * step
                vals.append(_aligned_overlap(engine, ref, geom.with_coords(c), 0, 1))
            d_fd = (vals[0] - vals[1]) / (2 * step)
            # measured agreement ~3e-5 Eh/bohr on components of 1e-3..8e-2
            assert h[atom, axis] == pytest.approx(gap * d_fd, abs=2e-4), (atom, axis)
        # the largest components must be resolved, not just both small
        assert np.abs(h).max() > 0.01


def test_coupling_keeps_the_basis_function_term_seen_under_rigid_translation():
    # The Hamiltonian-derivative part of h does not change under a rigid translation, but the
    # full derivative coupling of a finite atom-centred basis does: the "CSF" (basis-function)
    # term carries the electronic momentum matrix element (Fatehi & Subotnik, J. Phys. Chem.
    # Lett. 2012, 3, 2039, cited in PySCF's NonAdiabaticCouplings docstring). The engine keeps
    # that term, so sum_atoms h must equal (E1 - E0) times the finite-difference derivative of
    # <Psi_0(R)|Psi_1(R + t)> for a rigid shift t of the whole molecule.
    geom = _geometry()
    with CASSCFEngine(MethodSpec(method="casscf", basis="sto-3g", roots=1,
                                 active_space=(2, 2))) as engine:
        ev = engine.gradients(engine.states(geom), [], couplings=[(_S1, _S0)])
        assert set(ev.couplings) == {(_S0, _S1)}  # stored as (lower, upper)
        h = ev.couplings[(_S0, _S1)]
        gap = ev.energy("S1") - ev.energy("S0")
        step = 1e-3
        vals = []
        for sign in (1, -1):
            shifted = geom.with_coords(geom.coords_bohr + sign * step * np.array([0.0, 0.0, 1.0]))
            vals.append(_aligned_overlap(engine, ev, shifted, 0, 1))
    d_translation = (vals[0] - vals[1]) / (2 * step)
    assert abs(h[:, 2].sum()) > 1e-3  # not zero: the basis-function term is present
    assert h[:, 2].sum() == pytest.approx(gap * d_translation, abs=1e-4)


def test_coupling_needs_two_different_states():
    with CASSCFEngine(MethodSpec(method="casscf", basis="sto-3g", roots=1,
                                 active_space=(2, 2))) as engine:
        assert engine.has_couplings
        ev = engine.states(_geometry())
        with pytest.raises(InputError, match="two different states"):
            engine.gradients(ev, [], couplings=[(_S1, _S1)])
