"""Crossing objectives: exact penalty gradient, composed-gradient pieces, plane update, warnings.

References: central finite differences (common practice); the algebra of the penalty function
(Levine, Coe, Martinez, J. Phys. Chem. B 2008); the identities P g_I = P g_J = P gbar and the
branching-plane update properties (Maeda, Ohno, Morokuma, J. Chem. Theory Comput. 2010) as
derived in the project's method notes; scipy.optimize.minimize as an independent minimizer.
"""

import numpy as np
import pytest
from scipy.optimize import minimize

from surfcross.engine.base import MethodSpec
from surfcross.engine.model import conical_model, model_geometry, spin_model
from surfcross.errors import InputError
from surfcross.objectives.base import Objective
from surfcross.objectives.crossing import pair_warnings, remove_external
from surfcross.objectives.penalty import (PenaltyObjective, PenaltySettings, smoothed_gap,
                                          smoothed_gap_slope)
from surfcross.objectives.projected import (ProjectedObjective, ProjectedSettings,
                                            initial_plane_vector, update_plane_vector)
from surfcross.objectives.searches import choose_search, make_crossing_objective
from surfcross.objectives.spin import SpinCrossingObjective
from surfcross.coords.cartesian import external_basis
from surfcross.states import parse_states

Q = np.array([0.05, -0.1, 0.2, 0.03, -0.07, 0.11])


def fd_gradient(fun, q, h=1e-5):
    return np.array([(fun(q + h * e) - fun(q - h * e)) / (2 * h) for e in np.eye(q.size)])


def test_smoothed_gap_slope_is_its_derivative():
    # G(dE) = dE^2/(dE + alpha) and its derivative (Levine et al. 2008), checked by differences
    for gap in (1e-4, 3e-3, 0.05, 0.4):
        fd = (smoothed_gap(gap + 1e-7, 0.02) - smoothed_gap(gap - 1e-7, 0.02)) / 2e-7
        assert smoothed_gap_slope(gap, 0.02) == pytest.approx(fd, rel=1e-6)


@pytest.mark.parametrize("factory,states", [(conical_model, ("S1", "S2")),
                                            (spin_model, ("S1", "T1"))])
def test_penalty_gradient_matches_finite_differences(factory, states):
    obj = PenaltyObjective(factory(), states, PenaltySettings(sigma=7.0))
    assert isinstance(obj, Objective)

    def f(q):
        return obj.evaluate(model_geometry(q)).value

    value = obj.evaluate(model_geometry(Q))
    assert value.exact_gradient
    assert np.allclose(value.gradient.ravel(), fd_gradient(f, Q), atol=1e-8)


def test_projected_pieces():
    eng = conical_model()
    obj = ProjectedObjective(eng, ("S1", "S2"), ProjectedSettings(plane="coupling"))
    value = obj.evaluate(model_geometry(Q))
    pair = obj.last_pair
    xhat, yhat = value.subspace.directions
    # gap term: 2 dE x-hat = grad(dE^2)/|x1| (finite differences of the gap squared)
    gap2 = fd_gradient(lambda q: np.ptp([eng.states(model_geometry(q)).energy(s)
                                         for s in ("S1", "S2")]) ** 2, Q)
    n1 = np.linalg.norm(pair.x1)
    assert np.allclose(2 * pair.gap * xhat, gap2 / n1, atol=1e-7)
    # P removes x-hat and y-hat; P g_lower = P g_upper = P gbar (they differ by multiples of x1)
    P = value.subspace.projector()
    assert np.allclose(P @ pair.g_lower, P @ pair.g_upper, atol=1e-14)
    assert np.allclose(value.convergence_gradient.ravel(), P @ pair.gbar, atol=1e-14)
    assert np.allclose(value.gradient.ravel(), 2 * pair.gap * xhat + P @ pair.gbar)
    # y-hat lies along the part of h orthogonal to x1
    h_perp = pair.h - (pair.h @ xhat) * xhat
    assert abs(abs(yhat @ h_perp) / np.linalg.norm(h_perp) - 1) < 1e-12
    # curvature 2|x1| along x-hat makes the Newton step the linear extrapolation -dE/|x1|
    assert value.subspace.curvatures[0] == pytest.approx(2 * n1)
    step = -(value.gradient.ravel() @ xhat) / value.subspace.curvatures[0]
    assert step == pytest.approx(-pair.gap / n1)
    assert value.extra_criteria[0].name == "gap"


def test_spin_pieces():
    eng = spin_model()
    obj = SpinCrossingObjective(eng, ("S1", "T1"))
    value = obj.evaluate(model_geometry(Q))
    pair = obj.last_pair
    (xhat,) = value.subspace.directions
    n1 = np.linalg.norm(pair.x1)
    # gradient along x-hat = dE and curvature |x1|: Newton step -dE/|x1| (linear extrapolation)
    assert value.gradient.ravel() @ xhat == pytest.approx(pair.gap)
    assert value.subspace.curvatures[0] == pytest.approx(n1)
    # P removes only x-hat: the remaining gradient is g_lower (or g_upper) without its x1 part
    gl = pair.g_lower
    assert np.allclose(value.convergence_gradient.ravel(), gl - (gl @ xhat) * xhat, atol=1e-14)


def test_plane_update_properties():
    # properties of the updated vector (Maeda et al. 2010): y_k orthogonal to x_k, inside the
    # previous plane, sign continuous; fallback when x-hat did not move
    rng = np.random.default_rng(0)
    x0 = rng.standard_normal(9)
    x0 /= np.linalg.norm(x0)
    y0 = initial_plane_vector(x0, rng.standard_normal(9))
    assert abs(x0 @ y0) < 1e-14 and np.linalg.norm(y0) == pytest.approx(1)
    x1 = x0 + 0.3 * y0 + 0.1 * rng.standard_normal(9)
    x1 /= np.linalg.norm(x1)
    y1 = update_plane_vector(x0, y0, x1)
    assert abs(y1 @ x1) < 1e-12 and np.linalg.norm(y1) == pytest.approx(1)
    basis = np.array([x0, y0])
    assert np.linalg.norm(y1 - basis.T @ (basis @ y1)) < 1e-12
    assert y1 @ y0 > 0
    same = update_plane_vector(x0, y0, x0)
    assert np.allclose(same, y0)


def test_updated_plane_is_established_by_a_turn_and_committed_only_on_accept():
    # the plane update (Maeda et al. 2010) has no information at the first point: its first y
    # (the mean gradient orthogonalized to x-hat) would make the projected gradient vanish
    # there by construction, so no y is used until x-hat has turned
    obj = ProjectedObjective(conical_model(), ("S1", "S2"), ProjectedSettings(plane="updated"))
    first = obj.evaluate(model_geometry(Q))
    assert first.subspace.directions.shape[0] == 1  # x-hat only
    pair = obj.last_pair
    xhat = pair.x1 / np.linalg.norm(pair.x1)
    one_d = pair.gbar - (pair.gbar @ xhat) * xhat
    assert np.allclose(first.test_gradient.ravel(), one_d)  # tested with 1 - x-hat x-hat^T
    obj.accept(first)
    assert obj.y_prev is None
    trial = obj.evaluate(model_geometry(Q + 0.05))
    assert trial.subspace.directions.shape[0] == 2  # x-hat turned: the plane is known
    assert obj.y_prev is None  # a trial does not move the plane
    obj.accept(trial)
    assert np.allclose(obj.y_prev, trial.subspace.directions[1])
    with pytest.raises(InputError):
        obj.accept(first)  # not the latest trial any more


def test_external_modes_removed_for_molecules():
    rng = np.random.default_rng(1)
    coords = rng.standard_normal((4, 3)) * 2
    V = external_basis(coords)
    v = remove_external(rng.standard_normal(12), V)
    assert np.allclose(V @ v, 0, atol=1e-12)


def test_penalty_residual_gap_scales_with_inverse_sigma():
    # fixed sigma converges near, not on, the seam; residual gap ~ alpha |gbar.x|/(2 sigma |x1|)
    # (Levine et al. 2008 penalty function; the estimate is derived in the method notes).
    # Minimized with scipy's BFGS, an independent minimizer.
    eng = conical_model()
    gaps = []
    for sigma in (35.0, 70.0):
        obj = PenaltyObjective(eng, ("S1", "S2"), PenaltySettings(sigma=sigma))

        def f(q):
            v = obj.evaluate(model_geometry(q))
            return v.value, v.gradient.ravel()

        res = minimize(f, np.zeros(6), jac=True, method="BFGS", options={"gtol": 1e-10})
        obj.evaluate(model_geometry(res.x))
        pair = obj.last_pair
        n1 = np.linalg.norm(pair.x1)
        predicted = 0.02 * abs(pair.gbar @ pair.x1 / n1) / (2 * sigma * n1)
        assert pair.gap == pytest.approx(predicted, rel=0.1)
        gaps.append(pair.gap)
    assert gaps[0] / gaps[1] == pytest.approx(2.0, rel=0.1)


def test_auto_choice_and_factory():
    assert choose_search(("S1", "S2")) == "projected"
    assert choose_search(("S1", "T1")) == "spin"
    assert choose_search(("S1", "T1"), "penalty") == "penalty"
    with pytest.raises(InputError):
        choose_search(("S1", "S2"), "nonsense")
    obj = make_crossing_objective(conical_model(), ("S1", "S2"), preset="tight")
    assert isinstance(obj, ProjectedObjective) and obj.plane == "coupling"
    assert obj.settings.gap_tol_eh == 1e-4
    with pytest.raises(InputError):
        make_crossing_objective(conical_model(), ("S1", "S2"), "spin", PenaltySettings())


class _ResponseLike:
    spec = MethodSpec(method="tda")
    has_couplings = False


def test_reference_state_pair_warns_about_wrong_seam_dimension():
    # CIS/TDA/TDDFT: the reference does not couple to response states (Brillouin's theorem;
    # Levine et al. Mol. Phys. 2006; Li et al. J. Phys. Chem. Lett. 2014)
    texts = pair_warnings(_ResponseLike(), parse_states("S0,S1"))
    assert any("wrong dimension" in t and "CASSCF" in t and "spin-flip" in t for t in texts)
    assert any("higher-level" in t for t in texts)
    excited = pair_warnings(_ResponseLike(), parse_states("S1,S2"))
    assert not any("wrong dimension" in t for t in excited)
    assert any("higher-level" in t for t in excited)


@pytest.mark.parametrize("states", [("S1", "S2"), ("S2", "S1")])
def test_pair_energies_keep_their_adiabatic_names_in_either_order(states):
    # reference: the engine's own adiabatic energies (eigenvalues of the model's diabatic 2x2
    # matrix); the order in which the user names the pair must not swap the reported energies
    eng = conical_model()
    direct = eng.states(model_geometry(Q)).energies()
    value = PenaltyObjective(eng, states).evaluate(model_geometry(Q))
    assert value.energies_eh["S1"] == pytest.approx(direct["S1"], abs=1e-12)
    assert value.energies_eh["S2"] == pytest.approx(direct["S2"], abs=1e-12)


def test_reference_with_a_triplet_is_not_called_a_wrong_topology():
    # textbook (and the method notes, section 0): states of different spin do not couple
    # through a spin-free Hamiltonian, so an S0/T1 crossing is one-dimensional -- the right
    # dimension, not the linear-response artefact of S0/Sn pairs
    texts = pair_warnings(_ResponseLike(), parse_states("S0,T1"))
    assert not any("wrong dimension" in t or "instead of a conical" in t for t in texts)
    assert any("instabilit" in t for t in texts)  # the reference near a triplet instability
    assert any("higher-level" in t for t in texts)


def test_casscf_pair_gets_the_casscf_limits_not_the_response_ones():
    # the method notes (section 9 and the CASSCF remedies): SA-CASSCF is multireference but
    # lacks dynamic correlation; telling its users they used a single-reference response
    # method would be wrong
    class CasscfLike:
        spec = MethodSpec(method="casscf", active_space=(2, 2), roots=1)
        has_couplings = True

    texts = pair_warnings(CasscfLike(), parse_states("S0,S1"))
    assert not any("response" in t for t in texts)
    assert any("dynamic correlation" in t and "higher-level" in t for t in texts)
