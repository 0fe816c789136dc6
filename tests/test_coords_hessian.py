"""Model Hessians: the Lindh 1995 model (Cartesian and diagonal) and the simple guesses."""

from __future__ import annotations

import logging

import numpy as np
import pytest

from surfcross.coords.connectivity import build_primitives
from surfcross.coords.hessian import (
    diagonal_force_constants,
    diagonal_hessian,
    lindh_force_constants,
    lindh_hessian_cartesian,
    scaled_identity_hessian,
)
from surfcross.coords.primitives import Primitive, row
from test_coords_molecules import ethylene, formaldehyde, water, water_dimer

# Published functional form and 1995 parameters (Lindh, Bernhardsson, Karlström, Malmqvist,
# Chem. Phys. Lett. 1995, 241, 423; the table as reproduced identically by several independent
# implementations): k_r = 0.45 Eh/bohr^2, rho = exp[alpha (r_ref^2 - r^2)].
K_R = 0.45
PAIR_PARAMETERS = {  # (alpha bohr^-2, r_ref bohr) by periodic-table rows
    ("H", "H"): (1.0000, 1.35),
    ("H", "F"): (0.3949, 2.10),
    ("N", "N"): (0.2800, 2.87),
    ("C", "Cl"): (0.2800, 3.40),
    ("H", "Cl"): (0.3949, 2.53),
}


def _stretch_constant(symbols, xyz, hess):
    """Force constant along the bond coordinate: v^T H v with v the minimum-norm Cartesian
    displacement that lengthens the bond by one bohr (v = b / |b|^2)."""
    b = row(Primitive("bond", (0, 1)), xyz).reshape(-1)
    v = b / (b @ b)
    return v @ hess @ v


@pytest.mark.parametrize("pair", sorted(PAIR_PARAMETERS))
def test_stretch_constant_equals_k_r_at_the_reference_distance(pair):
    # derived from the published form: at r = r_ref, rho = 1, so k = k_r = 0.45 Eh/bohr^2
    _, r_ref = PAIR_PARAMETERS[pair]
    xyz = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, r_ref]])
    hess = lindh_hessian_cartesian(pair, xyz)
    assert np.isclose(_stretch_constant(pair, xyz, hess), K_R, rtol=1e-12)


@pytest.mark.parametrize("distance", [1.2, 1.7, 2.5])
def test_stretch_constant_follows_rho_away_from_reference(distance):
    # derived from the published form: k = k_r exp[alpha (r_ref^2 - r^2)], here for H-F
    alpha, r_ref = PAIR_PARAMETERS[("H", "F")]
    xyz = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, distance]])
    expected = K_R * np.exp(alpha * (r_ref**2 - distance**2))
    hess = lindh_hessian_cartesian(("H", "F"), xyz)
    assert np.isclose(_stretch_constant(("H", "F"), xyz, hess), expected, rtol=1e-12)
    prims = [Primitive("bond", (0, 1))]
    assert np.isclose(lindh_force_constants(("H", "F"), xyz, prims)[0], expected, rtol=1e-12)


@pytest.mark.parametrize("builder", [water, formaldehyde, ethylene])
def test_cartesian_model_is_symmetric_with_six_zero_modes(builder):
    # common practice: a Hessian built from internal-coordinate terms is symmetric and has
    # exactly six zero eigenvalues (rigid translations and rotations) for a non-linear molecule
    symbols, xyz = builder()
    hess = lindh_hessian_cartesian(symbols, xyz)
    assert np.allclose(hess, hess.T, atol=1e-14)
    evals = np.linalg.eigvalsh(hess)
    assert np.sum(np.abs(evals) < 1e-10) == 6
    assert evals[6] > 1e-6  # every internal motion has some stiffness


def test_water_model_frequencies_are_chemically_sensible():
    # order of magnitude check against experiment (recalled from memory: water fundamentals
    # about 1595, 3657, 3756 cm^-1): model frequencies from the mass-weighted model Hessian
    # should lie within a factor of two, the bend lowest
    from surfcross.elements import mass_amu
    from surfcross.units import AMU_IN_ELECTRON_MASS, HARTREE_IN_WAVENUMBER

    symbols, xyz = water()
    hess = lindh_hessian_cartesian(symbols, xyz)
    masses = np.repeat([mass_amu(s) * AMU_IN_ELECTRON_MASS for s in symbols], 3)
    evals = np.linalg.eigvalsh(hess / np.sqrt(np.outer(masses, masses)))[6:]
    wavenumbers = np.sqrt(evals) * HARTREE_IN_WAVENUMBER
    for got, exp in zip(wavenumbers, (1595.0, 3657.0, 3756.0)):
        assert exp / 2 < got < exp * 2


def test_straight_triples_use_linear_bend_terms():
    # CO2 exactly linear: the ordinary angle has no derivative there, the model must still be
    # finite, symmetric, and stiff against bending (5 zero modes for a linear molecule, common
    # practice)
    xyz = np.array([[0.0, 0.0, -2.19], [0.0, 0.0, 0.0], [0.0, 0.0, 2.19]])
    hess = lindh_hessian_cartesian(("O", "C", "O"), xyz)
    assert np.all(np.isfinite(hess))
    evals = np.linalg.eigvalsh(hess)
    assert np.sum(np.abs(evals) < 1e-10) == 5 and evals[5] > 1e-3


def test_heavy_elements_fall_back_to_scaled_unit_matrix(caplog):
    # the 1995 model covers H-Ar only (Lindh et al. 1995 parameter table); Br2 falls back
    xyz = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 4.3]])
    with caplog.at_level(logging.WARNING):
        hess = lindh_hessian_cartesian(("Br", "Br"), xyz)
    assert np.allclose(hess, 0.5 * np.eye(6)) and "H-Ar" in caplog.text
    consts = lindh_force_constants(("Br", "H"), xyz, [Primitive("bond", (0, 1))])
    assert np.allclose(consts, [0.5])


def test_diagonal_constants_of_primitives_follow_the_published_products():
    # derived from the published form: bend k_f rho_ij rho_jk, torsion k_t rho rho rho,
    # with k_f = 0.15 and k_t = 0.005; rho computed here independently from the table
    symbols, xyz = ethylene()
    prims, _ = build_primitives(symbols, xyz)
    consts = lindh_force_constants(symbols, xyz, prims)
    params = {("C", "C"): (0.2800, 2.87), ("C", "H"): (0.3949, 2.10), ("H", "C"): (0.3949, 2.10)}

    def rho(i, j):
        alpha, r_ref = params[(symbols[i], symbols[j])]
        return np.exp(alpha * (r_ref**2 - np.sum((xyz[i] - xyz[j]) ** 2)))

    for p, k in zip(prims, consts):
        a = p.atoms
        if p.kind == "angle":
            assert np.isclose(k, 0.15 * rho(a[0], a[1]) * rho(a[1], a[2]))
        elif p.kind == "dihedral":
            assert np.isclose(k, max(0.005 * rho(a[0], a[1]) * rho(a[1], a[2]) * rho(a[2], a[3]), 1e-3))
        elif p.kind == "bond":
            assert np.isclose(k, 0.45 * rho(a[0], a[1]))


def test_far_fragments_keep_a_floor_on_model_constants():
    symbols, xyz = water_dimer()
    xyz = xyz.copy()
    xyz[3:] += np.array([20.0, 0.0, 0.0])  # pull the acceptor far away
    prims, _ = build_primitives(symbols, xyz)
    assert lindh_force_constants(symbols, xyz, prims).min() >= 1e-3


def test_simple_guesses():
    # the documented simple guesses: 0.5 stretch, 0.2 bends, 0.1 torsion; 0.5 x unit matrix
    prims = [Primitive("bond", (0, 1)), Primitive("angle", (0, 1, 2)), Primitive("dihedral", (0, 1, 2, 3))]
    assert np.allclose(diagonal_force_constants(prims), [0.5, 0.2, 0.1])
    assert np.allclose(diagonal_hessian(prims), np.diag([0.5, 0.2, 0.1]))
    assert np.allclose(scaled_identity_hessian(2), 0.5 * np.eye(6))
