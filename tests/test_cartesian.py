"""Cartesian coordinates: rigid-body removal, frozen atoms, model Hessian, and the loop on a
rotation-invariant many-atom surface (a spring network, scenario of our own)."""

import numpy as np
import pytest

from surfcross.coords.cartesian import EXTERNAL_CURVATURE, CartesianCoordinates, external_basis
from surfcross.errors import InputError
from surfcross.geometry import Geometry
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings
from surfcross.testing import SpringNetwork

# water-shaped reference (0.96 angstrom, 104.5 degrees; only a convenient shape here)
WATER = Geometry.from_angstrom(["O", "H", "H"], [[0.0, 0.0, 0.117], [0.0, 0.757, -0.469],
                                                 [0.0, -0.757, -0.469]])
# a four-atom non-planar shape
CHAIN = Geometry.from_angstrom(["C", "O", "H", "H"], [[0.0, 0.0, 0.0], [0.0, 0.0, 1.21],
                                                     [0.0, 0.94, -0.58], [0.3, -0.94, -0.58]])


def _distorted(geom, seed=3, size=0.15):
    rng = np.random.default_rng(seed)
    return geom.with_coords(geom.coords_bohr + size * rng.normal(size=geom.coords_bohr.shape))


def test_external_basis_counts_and_orthonormality():
    # 3 translations + 3 rotations for a non-linear molecule, 2 rotations for a linear one,
    # none for one atom (rigid-body mechanics).
    for geom, m in ((WATER, 6), (CHAIN, 6)):
        V = external_basis(geom.coords_bohr)
        assert V.shape == (m, 3 * geom.natom)
        assert np.allclose(V @ V.T, np.eye(m), atol=1e-12)
    linear = np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 2.2], [0.0, 0.0, -2.2]])
    assert external_basis(linear).shape[0] == 5
    assert external_basis(np.zeros((1, 3))).shape[0] == 3


def test_invariant_gradient_is_untouched_and_drift_is_removed():
    # The gradient of a rotation/translation-invariant function is orthogonal to rigid-body
    # motion (invariance under infinitesimal rigid motions), so projection leaves it alone;
    # an added net force/torque is removed.
    geom = _distorted(WATER)
    coords = CartesianCoordinates(3, symbols=geom.symbols)
    g = SpringNetwork(WATER).evaluate(geom).gradient
    assert np.allclose(coords.gradient(geom.coords_bohr, g), g.ravel(), atol=1e-12)
    drifting = SpringNetwork(WATER, net_force=[0.01, -0.02, 0.005], net_torque=[0.0, 0.0, 0.01])
    g2 = drifting.evaluate(geom).gradient
    assert not np.allclose(g2, g)
    assert np.allclose(coords.gradient(geom.coords_bohr, g2), g.ravel(), atol=1e-12)


def _run(geom, coords, drift=(None, None), **settings):
    obj = SpringNetwork(WATER if geom.natom == 3 else CHAIN, net_force=drift[0], net_torque=drift[1])
    opts = OptimizerSettings(**settings)
    res = Optimizer(obj, coords, settings=opts, convergence=ConvergenceSettings.preset("tight")).run(geom)
    return obj, res


def _rotation_deg(a, b):
    """Angle of the best-fit (Kabsch) rotation taking shape a onto shape b, degrees."""
    a, b = a - a.mean(0), b - b.mean(0)
    U, _, Vt = np.linalg.svd(a.T @ b)
    d = np.sign(np.linalg.det(Vt.T @ U.T))
    R = Vt.T @ np.diag([1.0, 1.0, d]) @ U.T
    return float(np.degrees(np.arccos(np.clip((np.trace(R) - 1.0) / 2.0, -1.0, 1.0))))


def test_steps_keep_centre_of_mass_and_orientation():
    start = _distorted(WATER)
    masses = start.masses_amu
    # spurious net force and torque, as noisy engine gradients have
    drift = ([2e-3, -1e-3, 3e-3], [3e-3, -2e-3, 4e-3])
    coords = CartesianCoordinates(3, symbols=start.symbols)
    obj, res = _run(start, coords, drift=drift, initial_hessian="diagonal")
    assert res.converged
    com0 = masses @ start.coords_bohr / masses.sum()
    for rec in res.history:
        com = masses @ rec.geometry.coords_bohr / masses.sum()
        assert np.allclose(com, com0, atol=1e-12)
    # converged to the reference shape: all distances match (value ~ 0)
    assert np.allclose(res.geometry.distance_matrix_bohr(), WATER.distance_matrix_bohr(), atol=1e-4)
    # no overall rotation beyond the small second-order remainder of the linearized condition
    assert _rotation_deg(start.coords_bohr, res.geometry.coords_bohr) < 1.0
    # the same run without projection drifts and turns with the spurious force and torque
    obj2, res2 = _run(start, CartesianCoordinates(3, project_external=False),
                      drift=drift, initial_hessian="diagonal", max_iterations=30)
    com_end = masses @ res2.geometry.coords_bohr / masses.sum()
    assert np.linalg.norm(com_end - com0) > 0.05
    assert _rotation_deg(start.coords_bohr, res2.geometry.coords_bohr) > 1.5


def test_each_step_obeys_the_linear_eckart_rotation_condition():
    # sum_i (x_i - c) x s_i = 0 for every step (equal masses: H4-like shape of our own)
    geom = Geometry(("H",) * 4, CHAIN.coords_bohr)
    start = _distorted(geom, seed=5)
    coords = CartesianCoordinates(4, symbols=geom.symbols)
    _, res = _run(start, coords, initial_hessian="diagonal")
    assert res.converged
    accepted = [r for r in res.history if r.accepted]
    for prev, rec in zip(accepted, accepted[1:]):
        x = prev.geometry.coords_bohr
        torque = np.cross(x - x.mean(0), rec.step_bohr).sum(0)
        assert np.allclose(torque, 0.0, atol=1e-10)
        assert np.allclose(rec.step_bohr.sum(0), 0.0, atol=1e-12)


def test_frozen_atoms_stay_fixed():
    start = _distorted(CHAIN, seed=8)
    coords = CartesianCoordinates(4, frozen_atoms=(0, 2), symbols=start.symbols)
    _, res = _run(start, coords, initial_hessian="diagonal")
    assert res.converged
    for rec in res.history:
        assert np.array_equal(rec.geometry.coords_bohr[[0, 2]], start.coords_bohr[[0, 2]])
    assert np.all(res.history[-1].step_bohr[[0, 2]] == 0.0)
    # test gradient reported without the frozen rows: forces on frozen atoms do not block
    g = coords.project_cartesian(res.geometry.coords_bohr, np.ones((4, 3)))
    assert np.all(g[[0, 2]] == 0.0) and np.all(g[[1, 3]] == 1.0)


def test_model_hessian_is_used_and_external_modes_are_inert():
    from surfcross.coords.hessian import lindh_hessian_cartesian

    x = WATER.coords_bohr
    coords = CartesianCoordinates(3, symbols=WATER.symbols)
    H = coords.initial_hessian(WATER.symbols, x)
    P = coords.projector(x)
    ref = P @ lindh_hessian_cartesian(WATER.symbols, x) @ P + EXTERNAL_CURVATURE * (np.eye(9) - P)
    assert np.allclose(H, ref, atol=1e-12)
    V = external_basis(x)
    assert np.allclose(V @ H @ V.T, EXTERNAL_CURVATURE * np.eye(6), atol=1e-10)
    # an RFO step from an invariant gradient has no rigid-body component
    from surfcross.optimize import rfo_step

    g = coords.gradient(x, SpringNetwork(WATER).evaluate(_distorted(WATER)).gradient)
    step = rfo_step(g, H, 0.3).step
    assert np.allclose(V @ step, 0.0, atol=1e-12)


def test_loop_with_model_hessian_on_water_springs():
    start = _distorted(WATER, seed=11)
    coords = CartesianCoordinates(3, symbols=start.symbols)
    _, res = _run(start, coords)
    assert res.converged
    assert np.allclose(res.geometry.distance_matrix_bohr(), WATER.distance_matrix_bohr(), atol=1e-4)


def test_fallback_identity_without_symbols():
    coords = CartesianCoordinates(2, project_external=False)
    H = coords.initial_hessian(None, np.array([[0.0, 0, 0], [0, 0, 3.0]]))
    assert np.allclose(H, 0.5 * np.eye(6))


def test_bad_arguments():
    with pytest.raises(InputError, match="0-based"):
        CartesianCoordinates(3, frozen_atoms=(3,))
    with pytest.raises(InputError, match="every atom"):
        CartesianCoordinates(2, frozen_atoms=(0, 1))
    with pytest.raises(InputError, match="symbols"):
        CartesianCoordinates(3, symbols=("H", "H"))
    with pytest.raises(InputError, match="3-atom"):
        CartesianCoordinates(3).values(np.zeros((2, 3)))


def test_loop_runs_in_redundant_internals():
    # The same loop in the redundant internal coordinates of surfcross.coords.internal:
    # converges to the reference shape (all distances, value 0) of the spring network.
    from surfcross.coords.internal import RedundantInternals

    for ref in (WATER, CHAIN):
        start = _distorted(ref, seed=4)
        coords = RedundantInternals(start.symbols, start.coords_bohr)
        obj = SpringNetwork(ref)
        res = Optimizer(obj, coords, convergence=ConvergenceSettings.preset("tight")).run(start)
        assert res.converged and res.info["coordinates"] == "internal"
        assert np.allclose(res.geometry.distance_matrix_bohr(), ref.distance_matrix_bohr(), atol=1e-4)
        assert res.value.value < 1e-9


def test_loop_in_internals_with_constraints_converges_on_the_allowed_forces():
    # A frozen atom and a held bond: the springs cannot all relax, so the raw Cartesian
    # gradient stays finite; the force tests use the part the coordinates can act on.
    from surfcross.coords.constraints import Constraint
    from surfcross.coords.internal import RedundantInternals

    start = _distorted(CHAIN, seed=4)
    held = start.distance(0, 1)
    coords = RedundantInternals(start.symbols, start.coords_bohr,
                                (Constraint("atom", (2,)), Constraint("bond", (0, 1))))
    res = Optimizer(SpringNetwork(CHAIN), coords,
                    convergence=ConvergenceSettings.preset("tight")).run(start)
    assert res.converged
    assert res.geometry.distance(0, 1) == pytest.approx(held, abs=1e-6)
    assert np.array_equal(res.geometry.coords_bohr[2], start.coords_bohr[2])
    assert np.abs(res.value.gradient).max() > 1e-3  # constrained, not a free minimum
    assert res.history[-1].criteria[0].value < 1.5e-5
