"""Hessian updates: secant condition, positive definiteness, curvature policies."""

import numpy as np
import pytest

from surfcross.errors import InputError
from surfcross.optimize import clamp_eigenvalues, make_update, powell_damped
from surfcross.optimize.settings import CURVATURE_POLICIES, HESSIAN_UPDATES

rng = np.random.default_rng(11)


def _spd(n):
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    return (q * rng.uniform(0.5, 2.0, n)) @ q.T


@pytest.mark.parametrize("name", HESSIAN_UPDATES)
def test_secant_condition(name):
    # Every update of this family satisfies H_new s = y (Nocedal & Wright, Numerical
    # Optimization, ch. 6, recalled from memory). Use a pair with good curvature so that no
    # policy intervenes.
    H = _spd(5)
    s = rng.normal(size=5)
    A = _spd(5)
    y = A @ s
    out = make_update(name, "skip").update(H, s, y)
    assert out.action == "updated"
    assert np.allclose(out.hessian @ s, y, atol=1e-10)
    assert np.allclose(out.hessian, out.hessian.T)


def test_bfgs_matches_the_inverse_update_formula():
    # The inverse of the BFGS update equals (1 - r s y^T) B^-1 (1 - r y s^T) + r s s^T with
    # r = 1/(y.s), the form used by scipy.optimize's BFGS (Nocedal & Wright eq. 6.17,
    # recalled from memory).
    H = _spd(4)
    s = rng.normal(size=4)
    y = _spd(4) @ s
    new = make_update("bfgs").update(H, s, y).hessian
    r = 1.0 / (y @ s)
    inv = np.linalg.inv(H)
    ref = (np.eye(4) - r * np.outer(s, y)) @ inv @ (np.eye(4) - r * np.outer(y, s)) + r * np.outer(s, s)
    assert np.allclose(np.linalg.inv(new), ref, atol=1e-10)


def test_bfgs_damping_keeps_positive_definite():
    # A step with negative curvature (s.y < 0) would make a plain BFGS update indefinite;
    # Powell's damping keeps it positive definite (Powell 1978, recalled from memory).
    upd = make_update("bfgs", "damp")
    for _ in range(50):
        H = _spd(4)
        s = rng.normal(size=4)
        y = -rng.uniform(0.1, 2.0) * s + 0.1 * rng.normal(size=4)
        out = upd.update(H, s, y)
        assert out.action == "damped"
        assert np.linalg.eigvalsh(out.hessian)[0] > 0
    assert upd.counts["damped"] == 50


def test_powell_damping_formula():
    # theta = 0.8 s.H.s / (s.H.s - s.y) when s.y < 0.2 s.H.s; then s.y_damped = 0.2 s.H.s.
    H = np.eye(3)
    s = np.array([1.0, 0.0, 0.0])
    y = np.array([-1.0, 0.5, 0.0])
    yd, damped = powell_damped(H, s, y)
    assert damped and s @ yd == pytest.approx(0.2 * s @ H @ s)
    y_ok = np.array([0.5, 0.0, 0.0])
    assert powell_damped(H, s, y_ok)[0] is y_ok


@pytest.mark.parametrize("name", HESSIAN_UPDATES)
def test_skip_policy_leaves_hessian_unchanged(name):
    H = _spd(3)
    s = np.array([1.0, 0.0, 0.0])
    y = np.array([-0.3, 0.1, 0.0])
    upd = make_update(name, "skip")
    out = upd.update(H, s, y)
    assert out.action == "skipped" and np.array_equal(out.hessian, H)
    assert upd.state_dict()["counts"]["skipped"] == 1


def test_sr1_skip_rule():
    # SR1 skips when |r.s| < 1e-8 |r||s| with r = y - H s (standard safeguard).
    H = np.eye(2)
    s = np.array([1.0, 0.0])
    y = np.array([1.0, 1.0])  # r = (0, 1) is orthogonal to s
    out = make_update("sr1", "skip").update(H, s, y)
    assert out.action == "skipped"


def test_clamp_eigenvalues():
    H = np.diag([-1.0, 1e-6, 0.5, 1e3])
    w = np.linalg.eigvalsh(clamp_eigenvalues(H, 1e-4, 1e2))
    assert np.allclose(w, [1e-4, 1e-4, 0.5, 1e2])


def test_unknown_names_list_valid_choices():
    with pytest.raises(InputError, match="bfgs, sr1, psb, bofill"):
        make_update("dfp")
    with pytest.raises(InputError, match="damp, skip"):
        make_update("bfgs", "ignore")
    assert set(CURVATURE_POLICIES) == {"damp", "skip"}
