"""CI-vector overlaps of SA-CASSCF states between geometries (CASSCF engine)."""

import numpy as np
import pytest

import surfcross.engine.casscf_wavefunction as wmod
from surfcross.engine.base import MethodSpec
from surfcross.engine.casscf import CASSCFEngine
from surfcross.engine.casscf_wavefunction import ao_cross_overlap, casscf_overlap_matrix
from surfcross.errors import InputError
from surfcross.geometry import Geometry

pytestmark = pytest.mark.pyscf

pytest.importorskip("pyscf")

# our own distorted ethylene (angstrom)
_ETHYLENE = np.array([
    [0.000, 0.000, 0.667], [0.000, 0.000, -0.667],
    [0.100, 0.922, 1.240], [-0.300, -0.900, 1.230],
    [0.920, 0.200, -1.130], [-0.920, 0.000, -1.230],
])


def _geometry(shift=None) -> Geometry:
    g = Geometry.from_angstrom(["C", "C", "H", "H", "H", "H"], _ETHYLENE)
    return g if shift is None else g.with_coords(g.coords_bohr + shift)


@pytest.fixture(scope="module")
def pair():
    """SA-3-CASSCF(4,3) at a geometry and at a small displacement (0.02-0.05 bohr)."""
    shift = np.zeros((6, 3))
    shift[2] = [0.03, -0.02, 0.05]
    shift[0] = [0.0, 0.0, 0.03]
    spec = MethodSpec(method="casscf", basis="sto-3g", roots=2, active_space=(4, 3))
    with CASSCFEngine(spec) as engine:
        a = engine.states(_geometry())
        b = engine.states(_geometry(shift))
        same = engine.overlaps(a, a)["S"]
        ab = engine.overlaps(a, b)["S"]
    return a, b, same, ab


def test_identity_at_the_same_geometry(pair):
    # <Psi_I|Psi_J> = delta_IJ for orthonormal CI states (definition)
    _, _, same, _ = pair
    np.testing.assert_allclose(np.abs(same), np.eye(3), atol=1e-8)


def test_matches_pyscf_ci_overlap_with_nonorthogonal_orbitals(pair):
    # Reference library: PySCF's fci.addons.overlap(bra, ket, norb, nelec, s) for CI vectors in
    # non-orthogonal active orbitals; the doubly occupied core enters through det(S_core)^2 and
    # the Schur complement S_aa - S_ac S_cc^-1 S_ca (Lowdin's rule for determinant overlaps).
    from pyscf.fci import addons

    a, b, _, ab = pair
    wa, wb = a.wavefunction, b.wavefunction
    s = wa.mo_coeff.T @ ao_cross_overlap(wa, wb) @ wb.mo_coeff
    nc, na = wa.ncore, wa.ncas
    core = s[:nc, :nc]
    s_eff = s[nc:nc + na, nc:nc + na] - s[nc:nc + na, :nc] @ np.linalg.solve(core, s[:nc, nc:nc + na])
    ref = np.array([[np.linalg.det(core) ** 2 * addons.overlap(ci, cj, na, wa.nelecas, s=s_eff)
                     for cj in wb.ci] for ci in wa.ci])
    np.testing.assert_allclose(ab, ref, atol=1e-12)


def test_full_determinant_route_agrees_with_core_factorization(pair, monkeypatch):
    # both exact routes of our implementation must agree (algebraic identity)
    a, b, _, ab = pair
    monkeypatch.setattr(wmod, "_CORE_CONDITION_LIMIT", np.inf)
    full = casscf_overlap_matrix(a.wavefunction, b.wavefunction)
    np.testing.assert_allclose(full, ab, atol=1e-12)


def test_states_are_tracked_along_a_small_displacement(pair):
    # tracking criterion (assigned |overlap| well above 0.5, common practice): each state is
    # recognised at the displaced geometry and the squared overlaps of a row sum to ~1
    _, _, _, ab = pair
    mag = np.abs(ab)
    assert np.all(np.argmax(mag, axis=1) == np.arange(3))
    assert np.all(np.diag(mag) > 0.9)
    assert np.all(np.sum(ab ** 2, axis=1) > 0.95)


def test_different_active_spaces_are_refused(pair):
    a, _, _, _ = pair
    with CASSCFEngine(MethodSpec(method="casscf", basis="sto-3g", roots=1,
                                 active_space=(2, 2))) as engine:
        other = engine.states(_geometry())
        with pytest.raises(InputError, match="active spaces differ"):
            engine.overlaps(a, other)
