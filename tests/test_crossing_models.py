"""Analytic model engines: derivatives, couplings, overlaps and the closed-form seam minima.

Independent references: central finite differences (numerical analysis, common practice),
numpy's eigen-solver for the adiabatic states, and scipy.optimize.minimize (SLSQP) for the
constrained seam minimum.
"""

import numpy as np
import pytest
from scipy.optimize import minimize

from surfcross.engine.base import Engine
from surfcross.engine.model import avoided_model, conical_model, model_geometry, spin_model
from surfcross.states import parse_state

S0, S1, S2, T1 = (parse_state(x) for x in ("S0", "S1", "S2", "T1"))
Q = np.array([0.05, -0.1, 0.2, 0.03, -0.07, 0.11])


def energies(engine, q, labels):
    ev = engine.states(model_geometry(q))
    return np.array([ev.energy(lab) for lab in labels])


@pytest.mark.parametrize("factory,labels", [(conical_model, (S0, S1, S2)),
                                            (spin_model, (S0, S1, T1)),
                                            (avoided_model, (S0, S1, S2))])
def test_gradients_match_finite_differences(factory, labels):
    # central differences, step 1e-5 bohr (common practice)
    eng = factory()
    assert isinstance(eng, Engine)
    ev = eng.evaluate(model_geometry(Q), labels)
    h = 1e-5
    for k, lab in enumerate(labels):
        fd = np.array([(energies(eng, Q + h * e, labels)[k] - energies(eng, Q - h * e, labels)[k])
                       / (2 * h) for e in np.eye(6)])
        assert np.allclose(ev.gradient(lab).ravel(), fd, atol=1e-8)


def test_coupling_vector_equals_gap_times_derivative_coupling():
    # h = (E_J - E_I) <I|dJ/dR> (the off-diagonal Hellmann-Feynman relation, textbook);
    # <I|dJ> by central differences of the eigenvectors from numpy
    eng = conical_model()
    ev = eng.gradients(eng.states(model_geometry(Q)), [S1, S2], [(S1, S2)])
    h = ev.couplings[(S1, S2)].ravel()
    gap = ev.energy(S2) - ev.energy(S1)

    def vectors(q):
        _, v = np.linalg.eigh(eng.surface.diabatic(q)[0])
        return v

    v0 = vectors(Q)
    d = []
    for e in np.eye(6):
        vp, vm = vectors(Q + 1e-6 * e), vectors(Q - 1e-6 * e)
        vp[:, 1] *= np.sign(vp[:, 1] @ v0[:, 1])
        vm[:, 1] *= np.sign(vm[:, 1] @ v0[:, 1])
        d.append(v0[:, 0] @ (vp[:, 1] - vm[:, 1]) / 2e-6)
    sign = np.sign(h @ np.array(d))
    assert np.allclose(sign * h, gap * np.array(d), atol=1e-7)


def test_spin_model_has_no_coupling_and_overlaps_are_identity_at_one_geometry():
    eng = spin_model()
    ev = eng.gradients(eng.states(model_geometry(Q)), [S1, T1], [(S1, T1)])
    assert np.allclose(ev.couplings[(S1, T1)], 0.0)
    same = eng.overlaps(ev, ev)
    assert set(same) == {"S", "T"}
    for m in same.values():
        assert np.allclose(np.abs(m), np.eye(len(m)))
    conical = conical_model()
    a = conical.states(model_geometry(Q))
    O = conical.overlaps(a, conical.states(model_geometry(Q + 0.01)))["S"]
    assert np.allclose(O @ O.T, np.eye(3), atol=1e-12)  # eigenvectors stay orthonormal


@pytest.mark.parametrize("factory,two_conditions", [(conical_model, True), (spin_model, False)])
def test_closed_form_seam_minimum_matches_slsqp(factory, two_conditions):
    # reference: scipy SLSQP, minimize the mean diabatic energy subject to the seam conditions
    s = factory().surface
    cons = [{"type": "eq", "fun": lambda q: s.half_difference(q)[0],
             "jac": lambda q: s.half_difference(q)[1]}]
    if two_conditions:
        cons.append({"type": "eq", "fun": lambda q: s.coupling(q)[0],
                     "jac": lambda q: s.coupling(q)[1]})
    ref = minimize(lambda q: s.mean(q)[0], np.zeros(6), jac=lambda q: s.mean(q)[1],
                   constraints=cons, method="SLSQP", options={"ftol": 1e-14, "maxiter": 200})
    q, e = s.seam_minimum()
    assert ref.success
    assert np.allclose(q, ref.x, atol=1e-6)
    assert e == pytest.approx(ref.fun, abs=1e-10)
    e1, e2 = energies(factory(), q, s.labels)
    assert abs(e2 - e1) < 1e-12  # the two states are degenerate there


def test_avoided_model_never_crosses():
    eng = avoided_model(0.01)
    q, _ = eng.surface.seam_minimum()
    rng = np.random.default_rng(3)
    gaps = [np.ptp(energies(eng, q + 0.3 * rng.standard_normal(6), (S1, S2)))
            for _ in range(200)]
    assert min(gaps) >= 0.02 - 1e-12
    assert np.ptp(energies(eng, q, (S1, S2))) == pytest.approx(0.02, abs=1e-12)
