"""Crossing searches that call a point converged only when it is stationary on the seam.

Model surfaces of our own (``surfcross.testing.crossings``): the linear conical model (closed-
form lowest seam point), a conical model whose branching plane turns along a curved seam, and a
same-spin pair that never couples (a one-dimensional crossing). Independent references: the
closed-form seam minimum (a linear solve), and scipy.optimize.minimize (SLSQP) of the mean
energy on the smooth diabatic conditions d = 0, c = 0, whose answer is itself checked to be a
stationary point (Lagrange condition, least squares with numpy).
"""

import numpy as np
import pytest
from scipy.optimize import minimize

from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.engine.model import conical_model, model_geometry
from surfcross.objectives.projected import ProjectedObjective, ProjectedSettings
from surfcross.objectives.searches import make_crossing_objective, optimizer_settings_for
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings
from surfcross.testing.crossings import (seam_point, turning_plane_model,
                                         uncoupled_same_spin_model)


def run(objective, start_q, max_iterations=150):
    opt = Optimizer(objective, CartesianCoordinates(2, project_external=False),
                    settings=optimizer_settings_for(
                        "projected", OptimizerSettings(max_iterations=max_iterations,
                                                       initial_hessian="diagonal")),
                    convergence=ConvergenceSettings.preset("tight"))
    return opt.run(model_geometry(start_q))


def q_of(result):
    return (result.geometry.coords_bohr - model_geometry(np.zeros(6)).coords_bohr).ravel()


def seam_direction(surface, q, coupled=True):
    """A unit vector along the seam at q (a fixed vector of our own, with its components
    along the gradients of d and c removed)."""
    rows = [surface.half_difference(q)[1]] + ([surface.coupling(q)[1]] if coupled else [])
    J = np.array(rows)
    t = np.array([1.0, -0.5, 0.8, 0.3, -0.9, 0.6])
    t = t - J.T @ np.linalg.solve(J @ J.T, J @ t)
    return t / np.linalg.norm(t)


def slsqp_seam_minimum(surface, q0):
    """Mean energy minimized on d = 0, c = 0 (smooth diabatic constraints), then checked."""
    cons = [{"type": "eq", "fun": lambda q: surface.half_difference(q)[0],
             "jac": lambda q: surface.half_difference(q)[1]},
            {"type": "eq", "fun": lambda q: surface.coupling(q)[0],
             "jac": lambda q: surface.coupling(q)[1]}]
    res = minimize(lambda q: surface.mean(q)[0], q0, jac=lambda q: surface.mean(q)[1],
                   constraints=cons, method="SLSQP", options={"ftol": 1e-14, "maxiter": 500})
    assert res.success, res.message
    # the reference itself is stationary: grad m is a combination of grad d and grad c
    J = np.array([surface.half_difference(res.x)[1], surface.coupling(res.x)[1]])
    g = surface.mean(res.x)[1]
    lam = np.linalg.lstsq(J.T, g, rcond=None)[0]
    assert np.abs(g - J.T @ lam).max() < 1e-8
    assert abs(surface.half_difference(res.x)[0]) < 1e-10 and abs(surface.coupling(res.x)[0]) < 1e-10
    return res.x, surface.mean(res.x)[0]


@pytest.mark.parametrize("plane", ["updated", "coupling"])
def test_start_on_the_seam_away_from_the_minimum_reaches_the_minimum(plane):
    # before: the first plane vector (the mean gradient orthogonalized to x-hat) made the
    # projected gradient vanish at the first point, and a start on the seam 0.4 bohr from the
    # minimum "converged" there after one evaluation, 3.2e-2 Eh too high
    engine = conical_model()
    q_min, e_min = engine.surface.seam_minimum()  # closed form (linear solve)
    start = seam_point(engine.surface, q_min + 0.4 * seam_direction(engine.surface, q_min))
    assert np.linalg.norm(start - q_min) == pytest.approx(0.4, abs=0.05)
    obj = ProjectedObjective(engine, ("S1", "S2"), ProjectedSettings(plane=plane))
    result = run(obj, start)
    assert result.converged, result.message
    assert result.iterations > 0
    assert np.mean(list(result.energies_eh.values())) == pytest.approx(e_min, abs=1e-7)
    assert np.abs(q_of(result) - q_min).max() < 1e-3
    assert obj.verification["verified"]
    assert obj.verification["residual_seam_gradient_max_eh_bohr"] <= 1.5e-5


@pytest.mark.parametrize("plane", ["updated", "coupling"])
def test_turning_branching_plane_on_a_curved_seam(plane):
    engine = turning_plane_model()
    surface = engine.surface
    q_ref, e_ref = slsqp_seam_minimum(surface, np.zeros(6))
    # the plane really turns along this seam: compare the plane at the minimum and 0.4 away
    start = seam_point(surface, q_ref + 0.4 * seam_direction(surface, q_ref))
    planes = [np.linalg.qr(np.array([surface.half_difference(q)[1],
                                     surface.coupling(q)[1]]).T)[0] for q in (q_ref, start)]
    overlap = np.linalg.svd(planes[0].T @ planes[1], compute_uv=False)
    assert overlap.min() < 0.99  # principal angle above 8 degrees
    obj = ProjectedObjective(engine, ("S1", "S2"), ProjectedSettings(plane=plane))
    result = run(obj, start)
    assert result.converged, result.message
    assert np.mean(list(result.energies_eh.values())) == pytest.approx(e_ref, abs=1e-7)
    assert np.abs(q_of(result) - q_ref).max() < 1e-3
    assert obj.verification["verified"] and obj.verification["mode"] == "projected"


@pytest.mark.parametrize("start_on_seam", [False, True])
def test_same_spin_pair_without_coupling_under_auto(start_on_seam):
    # S1/S2 of one spin with no coupling at all (as for states of different symmetry): the
    # crossing is one-dimensional, its lowest point the closed form with the d = 0 condition
    # alone. Before: auto's projected search projected the downhill seam direction out
    # (x-hat never turns, so the first plane vector never changed) and stopped too high.
    engine = uncoupled_same_spin_model()
    q_min, e_min = engine.surface.seam_minimum()
    start = np.zeros(6)
    if start_on_seam:
        start = seam_point(engine.surface, q_min + 0.4 * seam_direction(engine.surface, q_min,
                                                                         coupled=False),
                           coupled=False)
    obj = make_crossing_objective(engine, ("S1", "S2"), "auto", preset="tight")
    result = run(obj, start)
    assert result.converged, result.message
    assert np.mean(list(result.energies_eh.values())) == pytest.approx(e_min, abs=1e-7)
    assert np.abs(q_of(result) - q_min).max() < 1e-3
    assert obj.verification["verified"]
    # the test at the end did not rest on a second direction, and none was found
    assert obj.verification["one_dimensional_residual_max_eh_bohr"] <= 1.5e-5
    assert obj.verification["check"]["coupling_found"] is False
