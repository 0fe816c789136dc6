"""Finite-difference Hessians and harmonic frequencies (surfcross.analysis.curvature).

Reference library: PySCF's analytic RHF Hessian and its harmonic analysis
(pyscf.hessian.rhf, pyscf.hessian.thermo).
"""

import numpy as np
import pytest
from pyscf import gto, scf
from pyscf.hessian import thermo

from surfcross.analysis.curvature import (external_modes, finite_difference_hessian,
                                          harmonic_analysis)
from surfcross.geometry import Geometry

pytestmark = pytest.mark.pyscf

# HF/STO-3G water minimum: 0.98941 angstrom, 100.027 degrees (PySCF, tight SCF; agrees with the
# NIST CCCBDB calculated geometry 0.989 angstrom / 100.0 degrees, the latter recalled from memory)
R, THETA = 0.98941, np.radians(100.027)
WATER = Geometry.from_angstrom(
    ["O", "H", "H"],
    [[0, 0, 0], [R * np.sin(THETA / 2), 0, R * np.cos(THETA / 2)],
     [-R * np.sin(THETA / 2), 0, R * np.cos(THETA / 2)]])


def _mol(coords_bohr):
    return gto.M(atom=[(s, c) for s, c in zip(WATER.symbols, coords_bohr)], unit="Bohr",
                 basis="sto-3g", verbose=0)


def _gradient(coords_bohr):
    mf = scf.RHF(_mol(coords_bohr)).run(conv_tol=1e-11)
    return mf.nuc_grad_method().kernel()


@pytest.fixture(scope="module")
def reference():
    mf = scf.RHF(_mol(WATER.coords_bohr)).run(conv_tol=1e-11)
    hess = mf.Hessian().kernel()
    res = thermo.harmonic_analysis(mf.mol, hess)
    return hess, np.sort(np.asarray(res["freq_wavenumber"]).real)


def test_fd_hessian_frequencies_match_pyscf_analytic(reference):
    _, ref_freqs = reference
    H = finite_difference_hessian(_gradient, WATER.coords_bohr, step_bohr=5e-3)
    freqs, modes = harmonic_analysis(H, WATER.coords_bohr, WATER.masses_amu)
    assert freqs.shape == (3,)  # 3N - 6 for a non-linear molecule
    # within a few cm^-1 of the analytic Hessian (reference library: PySCF)
    assert np.allclose(np.sort(freqs), ref_freqs, atol=3.0), (freqs, ref_freqs)
    assert np.allclose(np.linalg.norm(modes.reshape(3, -1), axis=1), 1.0)


def test_analytic_hessian_through_our_analysis(reference):
    hess, ref_freqs = reference
    H = hess.transpose(0, 2, 1, 3).reshape(9, 9)
    freqs, _ = harmonic_analysis(H, WATER.coords_bohr, WATER.masses_amu)
    assert np.allclose(np.sort(freqs), ref_freqs, atol=0.5)


def test_imaginary_mode_sign():
    # a saddle (negative curvature along one internal motion) gives a negative frequency
    hess = np.zeros((9, 9))
    E = external_modes(WATER.coords_bohr, WATER.masses_amu)
    P = np.eye(9) - E.T @ E
    rng = np.random.default_rng(1)
    A = rng.normal(size=(9, 9))
    A = P @ (A @ A.T + 9 * np.eye(9)) @ P
    w, U = np.linalg.eigh(A)
    w[np.argmax(w > 1e-8)] *= -1.0  # flip the lowest internal curvature
    hess = U @ np.diag(w) @ U.T
    sqm = np.repeat(np.sqrt(WATER.masses_amu), 3)
    freqs, _ = harmonic_analysis(hess * sqm[:, None] * sqm[None, :], WATER.coords_bohr,
                                 WATER.masses_amu)
    assert (freqs < 0).sum() == 1


def test_state_that_was_not_computed_is_an_input_error():
    # a state beyond the computed roots must reach the user as a surfcross error, not a
    # Python ValueError from a list lookup
    from surfcross.analysis.curvature import check_curvature
    from surfcross.engine.model import conical_model, model_geometry
    from surfcross.errors import InputError

    with pytest.raises(InputError, match="S5"):
        check_curvature(conical_model(), model_geometry(), "S5")
