"""Rational-function steps, trust control rules and convergence tests (pure functions)."""

import numpy as np
import pytest
from scipy.optimize import minimize

from surfcross.objectives.base import Criterion
from surfcross.optimize import (ConvergenceSettings, evaluate_criteria, judge_composed_step,
                                judge_true_step, quadratic_change, rfo_step, shrink_radius,
                                working_hessian)

rng = np.random.default_rng(7)


def _spd(n, lo=0.3, hi=3.0):
    q, _ = np.linalg.qr(rng.normal(size=(n, n)))
    return (q * rng.uniform(lo, hi, n)) @ q.T


def test_rfo_equals_newton_inside_trust_region_in_the_limit():
    # For positive-definite H, the RFO shift tends to 0 as g -> 0, so the step tends to the
    # Newton step -H^-1 g (Banerjee et al. 1985, recalled from memory; also plain algebra of
    # the augmented eigenproblem): the relative difference is O(|g|^2).
    H = _spd(5)
    g0 = rng.normal(size=5)
    for scale, tol in ((1e-2, 1e-3), (1e-4, 1e-7)):
        g = scale * g0
        prop = rfo_step(g, H, trust_radius=10.0)
        newton = -np.linalg.solve(H, g)
        assert not prop.restricted
        assert np.linalg.norm(prop.step - newton) <= tol * np.linalg.norm(newton)


def test_rfo_step_solves_the_augmented_eigenproblem():
    # Definition of the RFO step: (s, 1) is the lowest eigenvector of [[H, g], [g^T, 0]].
    H = _spd(4)
    g = rng.normal(size=4)
    prop = rfo_step(g, H, trust_radius=100.0)
    aug = np.block([[H, g[:, None]], [g[None, :], np.zeros((1, 1))]])
    w, v = np.linalg.eigh(aug)
    ref = v[:-1, 0] / v[-1, 0]
    assert np.allclose(prop.step, ref, atol=1e-10)
    assert prop.shift == pytest.approx(w[0], abs=1e-12)


def test_rfo_goes_downhill_with_an_indefinite_hessian():
    # The shift lies below the lowest eigenvalue, so s = -(H - lambda)^-1 g has g.s < 0 even
    # when H has negative eigenvalues (property of RFO; plain linear algebra).
    H = np.diag([-0.5, 0.2, 1.0, 3.0])
    q, _ = np.linalg.qr(rng.normal(size=(4, 4)))
    H = q @ H @ q.T
    for _ in range(20):
        g = rng.normal(size=4)
        prop = rfo_step(g, H, trust_radius=0.3)
        assert g @ prop.step < 0
        assert prop.shift < np.linalg.eigvalsh(H)[0]
        assert np.linalg.norm(prop.step) <= 0.3 * (1 + 1e-9)


def test_restricted_step_is_the_trust_region_minimizer():
    # For positive-definite H whose Newton step leaves the region, the restricted step
    # minimizes the quadratic model on the sphere |s| = tau. Reference: scipy's SLSQP on the
    # same constrained problem (general-purpose library).
    H = _spd(3)
    g = rng.normal(size=3) * 5
    tau = 0.2
    prop = rfo_step(g, H, tau)
    assert prop.restricted
    assert np.linalg.norm(prop.step) == pytest.approx(tau, rel=1e-9)
    ref = minimize(lambda s: g @ s + 0.5 * s @ H @ s, x0=-tau * g / np.linalg.norm(g),
                   jac=lambda s: g + H @ s, method="SLSQP",
                   constraints=[{"type": "ineq", "fun": lambda s: tau**2 - s @ s}],
                   options={"ftol": 1e-14, "maxiter": 500})
    assert np.allclose(prop.step, ref.x, atol=1e-6)
    assert prop.predicted_change == pytest.approx(quadratic_change(g, H, prop.step))
    assert prop.predicted_change == pytest.approx(ref.fun, abs=1e-9)


def test_zero_gradient_gives_zero_step():
    prop = rfo_step(np.zeros(3), np.eye(3), 0.3)
    assert np.all(prop.step == 0) and prop.predicted_change == 0.0


def test_working_hessian_structure():
    # P H P + c v v^T: v is an eigenvector with eigenvalue c, and H acts unchanged on the
    # complement (definition of the composed step model).
    H = _spd(4)
    v = np.array([[1.0, 1.0, 0.0, 0.0]]) / np.sqrt(2)
    Hw = working_hessian(H, v, [2.5])
    assert np.allclose(Hw @ v[0], 2.5 * v[0])
    P = np.eye(4) - v.T @ v
    assert np.allclose(P @ Hw @ P, P @ H @ P)


def test_trust_rules_of_true_objectives():
    # Standard ratio thresholds 0.25 / 0.75 (common practice; Nocedal & Wright ch. 4,
    # recalled from memory).
    kw = dict(trust_min=1e-3, trust_max=1.0, rise_tolerance=1e-8)
    good = judge_true_step(actual=-0.9, predicted=-1.0, step_length=0.3, radius=0.3, **kw)
    assert good.accept and good.trust_radius == pytest.approx(0.6)
    inside = judge_true_step(actual=-0.9, predicted=-1.0, step_length=0.1, radius=0.3, **kw)
    assert inside.accept and inside.trust_radius == pytest.approx(0.3)
    poor = judge_true_step(actual=-0.1, predicted=-1.0, step_length=0.3, radius=0.3, **kw)
    assert poor.accept and poor.trust_radius == pytest.approx(0.075)
    rise = judge_true_step(actual=1e-3, predicted=-1e-2, step_length=0.2, radius=0.3, **kw)
    assert not rise.accept and rise.trust_radius == pytest.approx(0.05)
    capped = judge_true_step(actual=-1.0, predicted=-1.0, step_length=0.8, radius=0.8, **kw)
    assert capped.trust_radius == pytest.approx(1.0)
    floor = judge_true_step(actual=1.0, predicted=-1.0, step_length=2e-3, radius=2e-3, **kw)
    assert floor.trust_radius == pytest.approx(1e-3)
    asked = judge_true_step(actual=-1.0, predicted=-1.0, step_length=0.3, radius=0.3,
                            objective_rejects=True, **kw)
    assert not asked.accept
    assert shrink_radius(0.3, 0.1, 1e-3) == pytest.approx(0.025)


def test_trust_rules_of_composed_objectives():
    kw = dict(grow_after=2, trust_min=1e-3, trust_max=1.0, rise_tolerance=1e-4)
    first = judge_composed_step(merit_change=-1e-3, step_length=0.1, radius=0.1, good_streak=0, **kw)
    assert first.accept and first.trust_radius == pytest.approx(0.1) and first.good_streak == 1
    second = judge_composed_step(merit_change=-1e-3, step_length=0.1, radius=0.1,
                                 good_streak=first.good_streak, **kw)
    assert second.trust_radius == pytest.approx(0.2) and second.good_streak == 0
    short = judge_composed_step(merit_change=-1e-3, step_length=0.01, radius=0.1, good_streak=1, **kw)
    assert short.good_streak == 0 and short.trust_radius == pytest.approx(0.1)
    bad = judge_composed_step(merit_change=1e-3, step_length=0.1, radius=0.1, good_streak=1, **kw)
    assert not bad.accept and bad.trust_radius == pytest.approx(0.025)


def test_criteria_report_every_test():
    conv = ConvergenceSettings.preset("normal")
    g = np.array([[3e-4, -5e-4, 0.0], [1e-4, 0.0, 0.0]])
    step = np.array([[1e-3, 0.0, 0.0], [0.0, -2e-3, 0.0]])
    gap = Criterion("gap", 2e-4, 1e-3, "Eh")
    crit = evaluate_criteria(conv, g, step, -2e-6, (gap,))
    names = [c.name for c in crit]
    assert names == ["max force", "rms force", "max step", "rms step", "energy change", "gap"]
    by = {c.name: c for c in crit}
    assert by["max force"].value == pytest.approx(5e-4) and not by["max force"].passed
    assert by["rms force"].value == pytest.approx(np.sqrt((9 + 25 + 1) * 1e-8 / 6))
    assert by["max step"].value == pytest.approx(2e-3) and not by["max step"].passed
    assert not by["energy change"].passed and by["gap"].passed
    start = evaluate_criteria(conv, g, None, None)
    assert [c.name for c in start] == ["max force", "rms force"]
