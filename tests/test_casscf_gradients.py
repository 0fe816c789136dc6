"""Analytic SA-CASSCF gradients of the CASSCF engine against finite differences of its own
energies (central differences, the standard check of any analytic gradient; PySCF's own test
suite checks its gradients the same way -- common practice)."""

import numpy as np
import pytest

from surfcross.engine.base import MethodSpec
from surfcross.engine.casscf import CASSCFEngine
from surfcross.errors import InputError
from surfcross.geometry import Geometry
from surfcross.states import parse_state

pytestmark = pytest.mark.pyscf

pytest.importorskip("pyscf")

# Ethylene, slightly twisted and distorted so that no symmetry hides sign errors (our own
# test geometry, angstrom).
_ETHYLENE = np.array([
    [0.000, 0.000, 0.667], [0.000, 0.000, -0.667],
    [0.100, 0.922, 1.240], [-0.300, -0.900, 1.230],
    [0.920, 0.200, -1.130], [-0.920, 0.000, -1.230],
])
_SPEC = MethodSpec(method="casscf", basis="sto-3g", roots=1, active_space=(2, 2))


def _geometry(xyz=_ETHYLENE) -> Geometry:
    return Geometry.from_angstrom(["C", "C", "H", "H", "H", "H"], xyz)


def test_gradients_of_two_states_match_central_differences():
    geom = _geometry()
    with CASSCFEngine(_SPEC) as engine:
        base = engine.states(geom)
        ev = engine.gradients(base, [parse_state("S0"), parse_state("S1")])
        step = 2e-3  # bohr
        coords = geom.coords_bohr
        # one carbon (C=C stretch), two hydrogens (bend / torsion-like motion)
        for atom, axis in [(0, 2), (2, 0), (3, 1), (4, 2)]:
            energies = []
            for sign in (1, -1):
                c = coords.copy()
                c[atom, axis] += sign * step
                energies.append(engine.states(geom.with_coords(c)))
            for label in ("S0", "S1"):
                fd = (energies[0].energy(label) - energies[1].energy(label)) / (2 * step)
                analytic = ev.gradient(label)[atom, axis]
                # measured max error 1.2e-5 Eh/bohr: individual SA state energies are first order in
                # the residual orbital gradient (~1e-6), so they carry a few 1e-8 Eh of noise
                assert analytic == pytest.approx(fd, abs=5e-5), (label, atom, axis, analytic, fd)


def test_gradients_sum_to_zero():
    # translational invariance of the energy: the forces on all atoms sum to zero
    # (a general property of any molecular potential -- common practice)
    with CASSCFEngine(_SPEC) as engine:
        ev = engine.evaluate(_geometry(), gradients_for=["S1"])
    assert np.abs(ev.gradient("S1").sum(axis=0)).max() < 1e-6


def test_gradients_refuse_unknown_state_and_unequal_weights():
    with CASSCFEngine(_SPEC) as engine:
        ev = engine.states(_geometry())
        with pytest.raises(InputError, match="ask for more roots"):
            engine.gradients(ev, [parse_state("S2")])
    spec = _SPEC.with_updates(state_weights=(0.7, 0.3))
    with CASSCFEngine(spec) as engine:
        ev = engine.states(_geometry())
        with pytest.raises(InputError, match="equal state"):
            engine.gradients(ev, [parse_state("S1")])


def test_gradients_for_an_earlier_evaluation_are_recomputed_consistently():
    # the engine keeps only the last PySCF object; asking for gradients of an older evaluation
    # must give the same numbers as asking right away
    geom = _geometry()
    shift = np.zeros((6, 3))
    shift[3:, :] = 0.05  # bohr, moves the hydrogens of one CH2 group
    other = geom.with_coords(geom.coords_bohr + shift)
    with CASSCFEngine(_SPEC) as engine:
        first = engine.states(geom)
        direct = engine.gradients(first, [parse_state("S1")]).gradient("S1")
        engine.states(other)
        later = engine.gradients(first, [parse_state("S1")]).gradient("S1")
    np.testing.assert_allclose(later, direct, atol=2e-6)
