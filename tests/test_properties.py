"""Property-based checks (hypothesis) of pieces every task relies on.

Outside facts used: rigid rotations and translations preserve all interatomic distances and
give an RMSD of zero after optimal superposition (Kabsch 1976; common practice); the
rational-function step with the lowest augmented-Hessian eigenpair is downhill for any
symmetric Hessian (Banerjee, Adams, Simons, Shepard 1985, recalled from memory).
"""

import numpy as np
from hypothesis import given, settings, strategies as st
from scipy.spatial.transform import Rotation

from surfcross.geometry import Geometry, kabsch_align, parse_xyz
from surfcross.optimize.steps import rfo_step

coords = st.lists(st.tuples(*[st.floats(-3, 3)] * 3), min_size=3, max_size=6)


def _spread(points):
    """Push points apart so no two atoms sit on top of each other."""
    x = np.asarray(points, float)
    return x + 2.0 * np.arange(len(x))[:, None] * np.array([1.0, 0.3, 0.1])


@settings(max_examples=40, deadline=None)
@given(coords, st.integers(0, 2**31 - 1), st.tuples(*[st.floats(-5, 5)] * 3))
def test_kabsch_recovers_rigid_motion(points, seed, shift):
    x = _spread(points)
    rot = Rotation.random(random_state=seed).as_matrix()
    moved = x @ rot.T + np.asarray(shift)
    aligned, value = kabsch_align(moved, x)
    assert value < 1e-8
    assert np.allclose(aligned, x, atol=1e-7)


@settings(max_examples=40, deadline=None)
@given(coords)
def test_xyz_round_trip(points):
    x = _spread(points)
    geom = Geometry.from_angstrom(["C"] + ["H"] * (len(x) - 1), x, charge=0,
                                  spin=(6 + len(x) - 1) % 2)
    back = parse_xyz(geom.to_xyz("round trip"), spin=geom.spin)[0]
    assert back.symbols == geom.symbols
    assert np.allclose(back.coords_bohr, geom.coords_bohr, atol=1e-9)


@settings(max_examples=60, deadline=None)
@given(st.integers(2, 6), st.integers(0, 2**31 - 1), st.floats(0.01, 1.0))
def test_rfo_step_is_downhill_and_inside_the_trust_radius(n, seed, radius):
    rng = np.random.default_rng(seed)
    a = rng.normal(size=(n, n))
    hessian = 0.5 * (a + a.T)  # any symmetric matrix, often indefinite
    gradient = rng.normal(size=n)
    step = rfo_step(gradient, hessian, radius).step
    assert gradient @ step < 0
    assert np.linalg.norm(step) <= radius * (1 + 1e-8)
