"""Characterization of crossings (pitch, asymmetry, tilt, peaked/sloped, bifurcating) and the
in-plane gap probe.

References: the linear two-state model and the quantities of Fdez. Galvan, Delcey, Pedersen,
Aquilante, Lindh, J. Chem. Theory Comput. 2016, 12, 3636 (half-difference convention). The
peaked/sloped and bifurcating/single-path labels are checked against *direct sampling* of the
surfaces on a small circle (the definitions themselves: the upper surface rises in every
direction; the lower surface has two minima on the circle), not against the formulas.
"""

import math

import numpy as np
import pytest

from surfcross.analysis.branching import characterize_crossing, characterize_from_probe
from surfcross.analysis.probe import probe_crossing
from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.engine.model import ModelEngine, ModelSurface, model_geometry
from surfcross.objectives.projected import ProjectedSettings
from surfcross.objectives.searches import make_crossing_objective, optimizer_settings_for
from surfcross.optimize import Optimizer, OptimizerSettings
from surfcross.analysis.probe import plane_from_value
from surfcross.states import parse_state
from surfcross.testing.crossings import avoided_case, conical_case, spin_case

S1, S2 = parse_state("S1"), parse_state("S2")


def hand_cone(pitch, asym, tilt, heading_deg, rotation, rng):
    """g, h, s (half-difference) of a linear cone with given parameters, in 9 dimensions."""
    e = np.linalg.qr(rng.standard_normal((9, 3)))[0].T
    gt = pitch * math.sqrt(1 + asym) * e[0]
    ht = pitch * math.sqrt(1 - asym) * e[1]
    c, s_ = math.cos(rotation), math.sin(rotation)
    g, h = c * gt - s_ * ht, s_ * gt + c * ht  # the inverse rotation of the orthogonalization
    th = math.radians(heading_deg)
    s = pitch * tilt * (math.cos(th) * e[0] + math.sin(th) * e[1]) + 0.02 * e[2]
    return g, h, s


def circle_verdicts(lower, upper):
    """(peaked, bifurcating) from energies sampled on a circle around the crossing."""
    peaked = upper.min() > 0
    minima = np.sum((lower < np.roll(lower, 1)) & (lower < np.roll(lower, -1)))
    return peaked, minima == 2


def test_hand_built_cone_parameters_are_recovered():
    rng = np.random.default_rng(7)
    g, h, s = hand_cone(0.05, 0.4, 0.7, 30.0, 0.9, rng)
    c = characterize_crossing(s - g, s + g, h)  # g = (g_upper - g_lower)/2
    assert c.kind == "conical" and c.h_source == "coupling"
    assert c.pitch == pytest.approx(0.05, rel=1e-12)
    assert c.asymmetry == pytest.approx(0.4, rel=1e-12)
    assert c.relative_tilt == pytest.approx(0.7, rel=1e-12)
    assert c.tilt_heading_deg == pytest.approx(30.0, abs=1e-9)
    assert c.g_norm == pytest.approx(0.05 * math.sqrt(1.4))
    assert c.x1_norm == pytest.approx(2 * np.linalg.norm(g))  # full vs half difference
    d = c.to_dict()
    for key in ("pitch", "asymmetry", "tilt", "topography", "paths", "convention"):
        assert key in d


def test_one_dimensional_crossing_has_only_the_gap_direction():
    rng = np.random.default_rng(2)
    gl, gu = rng.standard_normal(6), rng.standard_normal(6)
    c = characterize_crossing(gl, gu, None)
    assert c.kind == "one-dimensional" and c.pitch is None and c.topography is None
    assert c.x1_norm == pytest.approx(np.linalg.norm(gu - gl))


def test_peaked_and_bifurcating_labels_match_sampling_of_linear_cones():
    rng = np.random.default_rng(11)
    angles = np.linspace(0, 2 * np.pi, 2000, endpoint=False)
    checked = 0
    for _ in range(300):
        g, h, s = hand_cone(0.05, rng.uniform(0.02, 0.98), rng.uniform(0, 2.5),
                            rng.uniform(0, 360), rng.uniform(0, 6.3), rng)
        c = characterize_crossing(s - g, s + g, h)
        if abs(c.peaked_measure - 1) < 0.03 or abs(c.bifurcation_measure - 1) < 0.03:
            continue  # too close to the boundary for a sampled answer
        r = np.outer(np.cos(angles), c.x_hat) + np.outer(np.sin(angles), c.y_hat)
        root = np.sqrt((r @ g) ** 2 + (r @ h) ** 2)
        peaked, bifurcating = circle_verdicts(r @ s - root, r @ s + root)
        assert (c.topography == "peaked") == peaked
        assert (c.paths == "bifurcating") == bifurcating
        checked += 1
    assert checked > 200


def random_surface(rng):
    return ModelSurface(curvatures=rng.uniform(0.1, 0.5, 6), centre=rng.normal(0, 0.3, 6),
                        gamma=rng.uniform(0.02, 0.08), u=rng.standard_normal(6),
                        a=rng.normal(0, 0.1), lam=rng.uniform(0.01, 0.08),
                        w=rng.standard_normal(6), b=rng.normal(0, 0.1))


def test_labels_match_sampling_of_model_surfaces():
    # engine gradients and couplings at the closed-form MECI, energies sampled on a circle of
    # radius 1e-4 bohr in the branching plane
    rng = np.random.default_rng(5)
    angles = np.linspace(0, 2 * np.pi, 720, endpoint=False)
    kinds = set()
    checked = 0
    for _ in range(60):
        eng = ModelEngine(random_surface(rng))
        q, ex = eng.surface.seam_minimum()
        ev = eng.gradients(eng.states(model_geometry(q)), [S1, S2], [(S1, S2)])
        c = characterize_crossing(ev.gradient(S1), ev.gradient(S2), ev.couplings[(S1, S2)])
        if abs(c.peaked_measure - 1) < 0.05 or abs(c.bifurcation_measure - 1) < 0.05:
            continue
        lower, upper = [], []
        for t in angles:
            e = eng.states(model_geometry(q + 1e-4 * (math.cos(t) * c.x_hat
                                                      + math.sin(t) * c.y_hat)))
            lower.append(e.energy(S1) - ex)
            upper.append(e.energy(S2) - ex)
        peaked, bifurcating = circle_verdicts(np.array(lower), np.array(upper))
        assert (c.topography == "peaked") == peaked
        assert (c.paths == "bifurcating") == bifurcating
        kinds.add((c.topography, c.paths))
        checked += 1
        if checked >= 12 and len(kinds) >= 3:
            break
    assert len(kinds) >= 2  # both classes of at least one label were exercised


def test_probe_classifies_the_three_models():
    for case, verdict in ((conical_case(), "conical"), (spin_case(), "one-dimensional"),
                          (avoided_case(), "avoided")):
        eng = case.make_engine()
        s = eng.surface
        second = s.w if np.linalg.norm(s.w) > 0 else np.eye(6)[2]
        result = probe_crossing(eng, case.crossing_geometry, case.states, (s.u, second))
        assert result.verdict == verdict, result.message
        assert result.evaluations == 15
    assert result.centre_gap_eh == pytest.approx(0.02, rel=1e-9)


def test_probe_estimates_match_couplings_after_a_search_without_couplings():
    # search with the updated plane (no h used), then probe its plane: |g~| and |h~| must
    # match the characterization from the analytic couplings at the same point
    case = conical_case()
    eng = case.make_engine()
    obj = make_crossing_objective(eng, case.states, "projected",
                                  ProjectedSettings(plane="updated"))
    opt = Optimizer(obj, CartesianCoordinates(2, project_external=False),
                    settings=optimizer_settings_for("projected",
                                                    OptimizerSettings(initial_hessian="diagonal")))
    result = opt.run(case.start)
    assert result.converged
    plane = plane_from_value(result.value)
    pair = obj.accepted_pair
    probe = probe_crossing(eng, result.geometry, (pair.lower, pair.upper), plane)
    assert probe.verdict == "conical"
    ev = eng.gradients(eng.states(result.geometry), [S1, S2], [(S1, S2)])
    exact = characterize_crossing(ev.gradient(S1), ev.gradient(S2), ev.couplings[(S1, S2)])
    estimate = characterize_from_probe(probe, pair.g_lower, pair.g_upper)
    assert estimate.h_source == "estimate"
    assert estimate.pitch == pytest.approx(exact.pitch, rel=2e-3)
    assert estimate.asymmetry == pytest.approx(exact.asymmetry, abs=5e-3)
    assert estimate.relative_tilt == pytest.approx(exact.relative_tilt, rel=5e-3)
    assert estimate.topography == exact.topography and estimate.paths == exact.paths
