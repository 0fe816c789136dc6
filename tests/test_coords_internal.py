"""RedundantInternals: gradients, Hessians, back-transformation, constraints and rebuilds."""

from __future__ import annotations

import numpy as np
import pytest

from surfcross.coords.base import CoordinateSystem
from surfcross.coords.constraints import Constraint
from surfcross.coords.internal import RedundantInternals
from surfcross.errors import BackTransformError, InputError
from test_coords_molecules import ethylene, formaldehyde, water, water_dimer


# --- an analytic energy of the Cartesians (invented, for tests only) ------------------------

def _pairs(n):
    return [(i, j) for i in range(n) for j in range(i + 1, n)]


def morse_energy(xyz, ref, depth=0.2, width=1.1):
    """Sum of Morse terms over all atom pairs with minima at the distances of ``ref``."""
    total = 0.0
    for i, j in _pairs(len(xyz)):
        r, r0 = np.linalg.norm(xyz[i] - xyz[j]), np.linalg.norm(ref[i] - ref[j])
        total += depth * (1.0 - np.exp(-width * (r - r0))) ** 2
    return total


def morse_gradient(xyz, ref, depth=0.2, width=1.1):
    """Analytic dE/dx of :func:`morse_energy`, (natom, 3)."""
    grad = np.zeros_like(xyz)
    for i, j in _pairs(len(xyz)):
        d = xyz[i] - xyz[j]
        r, r0 = np.linalg.norm(d), np.linalg.norm(ref[i] - ref[j])
        e = np.exp(-width * (r - r0))
        dedr = 2.0 * depth * width * (1.0 - e) * e
        grad[i] += dedr * d / r
        grad[j] -= dedr * d / r
    return grad


def morse_hessian_at_minimum(ref, depth=0.2, width=1.1):
    """Analytic Hessian of :func:`morse_energy` at ``ref`` (every pair at its minimum): the
    second derivative of a Morse term there is 2 D a^2 along the bond direction."""
    n = len(ref)
    hess = np.zeros((3 * n, 3 * n))
    for i, j in _pairs(n):
        b = np.zeros(3 * n)
        u = (ref[i] - ref[j]) / np.linalg.norm(ref[i] - ref[j])
        b[3 * i:3 * i + 3], b[3 * j:3 * j + 3] = u, -u
        hess += 2.0 * depth * width**2 * np.outer(b, b)
    return hess


def _distorted(xyz, seed=3, scale=0.08):
    return xyz + np.random.default_rng(seed).normal(scale=scale, size=xyz.shape)


def _in_range_step(system, xyz, seed, size):
    """A random dq of rms ``size`` inside the non-redundant space (unconstrained systems)."""
    dq = np.random.default_rng(seed).normal(size=len(system.primitives))
    dq = system.project_step(xyz, dq)
    return size * dq / np.sqrt(np.mean(dq**2))


def test_satisfies_the_coordinate_system_protocol():
    symbols, xyz = water()
    system = RedundantInternals(symbols, xyz)
    assert isinstance(system, CoordinateSystem) and system.name == "internal"


# --- gradient and Hessian transformation ---------------------------------------------------

@pytest.mark.parametrize("builder", [water, formaldehyde, ethylene, water_dimer])
def test_gradient_predicts_first_order_energy_change(builder):
    # reference: first-order Taylor expansion (chain rule, common practice). The q-space
    # gradient must predict E(x(q + h dq)) - E(x(q - h dq)) = 2 h g_q . dq + O(h^3), where the
    # Cartesian geometries come from the back-transformation and E is an analytic function.
    symbols, ref = builder()
    xyz = _distorted(ref)
    system = RedundantInternals(symbols, xyz)
    g_q = system.gradient(xyz, morse_gradient(xyz, ref))
    for seed in range(3):
        dq = _in_range_step(system, xyz, seed, 1.0)
        h = 1e-4
        e_plus = morse_energy(system.displace(xyz, h * dq), ref)
        e_minus = morse_energy(system.displace(xyz, -h * dq), ref)
        assert np.isclose((e_plus - e_minus) / (2 * h), g_q @ dq, rtol=1e-5, atol=1e-9)


def test_gradient_dot_step_equals_cartesian_gradient_dot_displacement():
    # reference: chain rule, dE = g_x . dx = g_q . dq to first order (common practice)
    symbols, ref = ethylene()
    xyz = _distorted(ref, seed=11)
    system = RedundantInternals(symbols, xyz)
    g_x = morse_gradient(xyz, ref)
    dq = _in_range_step(system, xyz, 5, 1e-5)
    dx = system.displace(xyz, dq) - xyz
    assert np.isclose(np.sum(g_x * dx), system.gradient(xyz, g_x) @ dq, rtol=1e-4)


@pytest.mark.pyscf
def test_gradient_against_pyscf_hf_water():
    # reference library: PySCF analytic RHF/STO-3G gradient and energies. The q-space
    # gradient must predict the energy change along a back-transformed internal step.
    from pyscf import gto, scf

    symbols, xyz = water()
    xyz = _distorted(xyz, seed=2, scale=0.05)

    def run(coords):
        mol = gto.M(atom=list(zip(symbols, coords)), unit="Bohr", basis="sto-3g", verbose=0)
        mf = scf.RHF(mol).run(conv_tol=1e-11)
        return mf.e_tot, mf

    _, mf = run(xyz)
    system = RedundantInternals(symbols, xyz)
    g_q = system.gradient(xyz, mf.nuc_grad_method().kernel())
    dq = np.array([0.6, -0.3, 0.7])
    h = 2e-3
    e_plus, _ = run(system.displace(xyz, h * dq))
    e_minus, _ = run(system.displace(xyz, -h * dq))
    assert abs((e_plus - e_minus) / (2 * h) - g_q @ dq) < 2e-5


def test_gradient_with_frozen_atom_and_held_dihedral():
    # reference: first-order Taylor expansion as above, now in the reduced space of moves that
    # keep atom 1 fixed and the H-C-C-H dihedral at its start value
    symbols, ref = ethylene()
    xyz = _distorted(ref, seed=12, scale=0.05)
    system = RedundantInternals(symbols, xyz, (Constraint("atom", (0,)), Constraint("dihedral", (2, 0, 1, 4))))
    g_q = system.gradient(xyz, morse_gradient(xyz, ref))
    dq = system.project_step(xyz, np.random.default_rng(1).normal(size=len(system.primitives)))
    h = 1e-4
    e_plus = morse_energy(system.displace(xyz, h * dq), ref)
    e_minus = morse_energy(system.displace(xyz, -h * dq), ref)
    assert np.isclose((e_plus - e_minus) / (2 * h), g_q @ dq, rtol=1e-5, atol=1e-9)
    # the frozen atom's Cartesian force plays no role
    g_other = morse_gradient(xyz, ref)
    g_other[0] += 5.0
    assert np.allclose(system.gradient(xyz, g_other), g_q)


def test_hessian_transformation_at_a_minimum():
    # reference: second-order Taylor expansion at a stationary point, where the first-order
    # transformation H_q = G^- B H_x B^T G^- is exact (the gradient term vanishes; common
    # practice). Checked by central second differences of the analytic energy along q.
    symbols, ref = formaldehyde()
    system = RedundantInternals(symbols, ref)
    h_q = system.hessian(ref, morse_hessian_at_minimum(ref))
    assert np.allclose(h_q, h_q.T)
    for seed in range(3):
        dq = _in_range_step(system, ref, seed, 1.0)
        h = 1e-3
        e0 = morse_energy(ref, ref)
        ep = morse_energy(system.displace(ref, h * dq), ref)
        em = morse_energy(system.displace(ref, -h * dq), ref)
        assert np.isclose((ep - 2 * e0 + em) / h**2, dq @ h_q @ dq, rtol=1e-4)


def test_initial_hessian_is_positive_definite_and_inert_outside_the_working_space():
    # common practice: a model Hessian for minimization must be positive definite
    symbols, xyz = water_dimer()
    system = RedundantInternals(symbols, xyz)
    h_q = system.initial_hessian(symbols, xyz)
    evals = np.linalg.eigvalsh(h_q)
    assert np.allclose(h_q, h_q.T) and evals.min() > 0
    # the set has 14 primitives for 12 internal motions: two redundant directions
    assert len(system.primitives) == 14 and np.sum(evals > 999.0) == 2


def _cartesian_hessian_fd(xyz, ref, step=1e-4):
    """Central differences of the analytic Morse gradient, (3N, 3N)."""
    n = xyz.size
    hess = np.zeros((n, n))
    for k in range(n):
        plus, minus = xyz.copy().reshape(-1), xyz.copy().reshape(-1)
        plus[k] += step
        minus[k] -= step
        diff = morse_gradient(plus.reshape(-1, 3), ref) - morse_gradient(minus.reshape(-1, 3), ref)
        hess[k] = diff.reshape(-1) / (2 * step)
    return 0.5 * (hess + hess.T)


def test_newton_steps_in_internals_reach_the_known_minimum():
    # end-to-end check: the Morse model has its minimum, by construction, where every pair
    # distance equals that of the reference geometry. Newton steps in internals (Hessian
    # eigenvalues taken in absolute value, step capped at 0.3) must get there.
    symbols, ref = ethylene()
    xyz = _distorted(ref, seed=5, scale=0.15)
    system = RedundantInternals(symbols, xyz)
    for _ in range(40):
        g_q = system.gradient(xyz, morse_gradient(xyz, ref))
        if np.max(np.abs(g_q)) < 1e-8:
            break
        evals, evecs = np.linalg.eigh(system.hessian(xyz, _cartesian_hessian_fd(xyz, ref)))
        dq = system.project_step(xyz, -evecs @ ((evecs.T @ g_q) / np.abs(evals)))
        dq *= min(1.0, 0.3 / np.linalg.norm(dq))
        xyz = system.displace(xyz, dq)
        if system.needs_rebuild(xyz):
            system = system.rebuilt(xyz)
    dist = np.linalg.norm(xyz[:, None] - xyz[None], axis=-1)
    dist_ref = np.linalg.norm(ref[:, None] - ref[None], axis=-1)
    assert np.allclose(dist, dist_ref, atol=1e-6)


# --- back-transformation ---------------------------------------------------------------------

def test_small_step_round_trip_without_redundancy():
    # water has exactly 3 primitives for 3 internal motions: q + dq is reached exactly
    symbols, xyz = water()
    system = RedundantInternals(symbols, xyz)
    dq = np.array([0.05, -0.03, np.radians(4.0)])
    out = system.displace_with_report(xyz, dq)
    assert out.converged and not out.used_fallback
    assert np.allclose(system.values(out.coords_bohr), system.values(xyz) + dq, atol=1e-9)


def test_round_trip_error_is_second_order_with_redundancy():
    # a redundant set cannot meet every q + dq exactly; the miss must shrink like |dq|^2
    symbols, xyz = ethylene()
    xyz = _distorted(xyz, seed=4, scale=0.05)
    system = RedundantInternals(symbols, xyz)
    dq = _in_range_step(system, xyz, 8, 1.0)
    misses = []
    for size in (1e-2, 1e-3):
        new = system.displace(xyz, size * dq)
        misses.append(np.linalg.norm(system.difference(system.values(new), system.values(xyz) + size * dq)))
    assert misses[1] < 2e-6
    assert misses[1] < misses[0] / 50.0


def test_dihedral_step_across_pi_is_wrapped():
    # ethylene twisted near 180 deg for one H-C-C-H: a step past +pi must land near -pi + ...
    symbols, xyz = ethylene()
    system = RedundantInternals(symbols, xyz)
    q0 = system.values(xyz)
    k = next(i for i, p in enumerate(system.primitives) if p.kind == "dihedral" and abs(q0[i]) > 3.0)
    dq = system.project_step(xyz, np.eye(len(q0))[k] * 0.2)
    new = system.displace(xyz, dq)
    change = system.difference(system.values(new), q0)[k]
    assert np.isclose(change, dq[k], atol=1e-4)


def test_large_impossible_step_falls_back_safely():
    # asking the water angle to grow by 172 deg (to 276 deg) cannot be met; the system must
    # return a sensible geometry from its best iterate instead of failing
    symbols, xyz = water()
    system = RedundantInternals(symbols, xyz)
    out = system.displace_with_report(xyz, np.array([0.0, 0.0, np.radians(172.0)]))
    assert out.used_fallback and not out.converged
    assert np.all(np.isfinite(out.coords_bohr))
    dist = np.linalg.norm(out.coords_bohr[:, None] - out.coords_bohr[None], axis=-1)
    assert dist[np.triu_indices(3, 1)].min() > 0.5


def test_collapsing_step_raises_back_transform_error():
    # H2 at 1.4 bohr asked to shrink to 0.05 bohr: no usable geometry exists
    system = RedundantInternals(("H", "H"), np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 1.4]]))
    with pytest.raises(BackTransformError, match="shorter step"):
        system.displace(np.array([[0.0, 0.0, 0.0], [0.0, 0.0, 1.4]]), np.array([-1.35]))


# --- constraints -------------------------------------------------------------------------------

def _ethylene_constraints():
    return (Constraint("atom", (0,)), Constraint("bond", (1, 4)), Constraint("angle", (2, 0, 3)),
            Constraint("dihedral", (2, 0, 1, 4)))


def test_held_constraints_survive_many_random_steps():
    # the held values are the start values, measured independently with numpy below
    symbols, xyz = ethylene()
    xyz = _distorted(xyz, seed=9, scale=0.03)
    system = RedundantInternals(symbols, xyz, _ethylene_constraints())
    start = xyz.copy()
    bond0 = np.linalg.norm(xyz[1] - xyz[4])
    rng = np.random.default_rng(21)
    current = xyz
    for _ in range(25):
        dq = system.project_step(current, rng.normal(scale=0.04, size=len(system.primitives)))
        current = system.displace(current, dq)
        assert np.array_equal(current[0], start[0])
        assert abs(np.linalg.norm(current[1] - current[4]) - bond0) < 1e-8
        assert np.max(np.abs(system.constraint_errors(current))) < 1e-8
    assert np.linalg.norm(current - start) > 0.1  # the molecule did move


def test_gradient_has_no_component_along_constraints():
    # Peng et al. 1996 projector: a step that changes only the constrained primitives (and
    # what they drag along) must be orthogonal to the projected gradient
    symbols, ref = ethylene()
    xyz = _distorted(ref, seed=6)
    system = RedundantInternals(symbols, xyz, (Constraint("bond", (0, 1)),))
    g_q = system.gradient(xyz, morse_gradient(xyz, ref))
    k = system.primitives.index(next(p for p in system.primitives if p.atoms == (0, 1)))
    assert abs(g_q[k]) < 1e-12
    drive = RedundantInternals(symbols, xyz, (Constraint("bond", (0, 1), target=3.0),))
    move = drive.project_step(xyz, np.zeros(len(drive.primitives)))
    assert abs(g_q @ move) < 1e-10


def test_driven_bond_and_angle_reach_targets_in_limited_steps():
    # targets in bohr (bond) and degrees (angle); per-step limits 0.1 bohr and 5 deg
    symbols, xyz = ethylene()
    cc0 = np.linalg.norm(xyz[0] - xyz[1])
    system = RedundantInternals(symbols, xyz, (Constraint("bond", (0, 1), target=cc0 + 0.25),
                                               Constraint("angle", (2, 0, 3), target=105.0)))
    current, history = xyz, []
    for _ in range(4):
        current = system.displace(current, system.project_step(current, np.zeros(len(system.primitives))))
        history.append(np.linalg.norm(current[0] - current[1]))
    steps = np.diff([cc0] + history)
    assert np.allclose(steps, [0.1, 0.1, 0.05, 0.0], atol=1e-8)
    u, v = current[2] - current[0], current[3] - current[0]
    assert np.isclose(np.degrees(np.arccos(u @ v / np.linalg.norm(u) / np.linalg.norm(v))), 105.0, atol=1e-6)


def test_bad_constraints_are_rejected():
    symbols, xyz = water()
    with pytest.raises(InputError):
        RedundantInternals(symbols, xyz, (Constraint("angle", (1, 0, 2), target=179.0),))
    with pytest.raises(InputError):
        RedundantInternals(symbols, xyz, (Constraint("bond", (0, 5)),))


# --- rebuild -----------------------------------------------------------------------------------

def test_breaking_bond_requests_rebuild_and_rebuilt_keeps_constraints():
    # the O-H bond criterion is 1.3 x (0.66 + 0.31) A = 1.26 A (Cordero covalent radii via
    # PySCF's table); stretched to 2.0 A the bond is broken, at 1.0 A it is not
    symbols, xyz = water()
    system = RedundantInternals(symbols, xyz, (Constraint("angle", (1, 0, 2)),))
    unit = (xyz[1] - xyz[0]) / np.linalg.norm(xyz[1] - xyz[0])
    near = xyz.copy()
    near[1] = xyz[0] + unit * 1.0 / 0.529177
    far = xyz.copy()
    far[1] = xyz[0] + unit * 2.0 / 0.529177
    assert not system.needs_rebuild(near)
    assert system.needs_rebuild(far) and "broke" in system.rebuild_reason(far)
    fresh = system.rebuilt(far)
    assert not fresh.needs_rebuild(far)
    links = [p for p in fresh.primitives if p.kind == "bond" and p.link]
    assert len(links) == 1 and links[0].atoms == (0, 1)
    assert fresh.constraints == system.constraints
    assert np.isclose(fresh.constraints[0].target, 104.4776)  # held at the start value


def test_forming_bond_requests_rebuild():
    symbols, xyz = water_dimer()
    system = RedundantInternals(symbols, xyz)
    squeezed = xyz.copy()
    squeezed[3:] += (xyz[2] - xyz[3]) * 0.5  # move the acceptor halfway toward the donor H
    assert system.needs_rebuild(squeezed) and "formed" in system.rebuild_reason(squeezed)
