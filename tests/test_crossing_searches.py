"""Every crossing search reaches the known crossing of the analytic models.

The answers are closed-form seam minima (surfcross.engine.model; checked against scipy SLSQP
in test_crossing_models.py). Tolerances: the projected and spin searches stop on forces of
4.5e-4 Eh/bohr (the common-practice threshold) and the gap; the penalty search converges to a
residual gap below the tolerance, so its geometry error is about gap/|x1|.
"""

import numpy as np
import pytest

from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.objectives.penalty import PenaltySettings
from surfcross.objectives.projected import ProjectedSettings
from surfcross.objectives.searches import make_crossing_objective, optimizer_settings_for
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings
from surfcross.testing.crossings import avoided_case, conical_case, spin_case


def search(case, name, settings=None, preset="default", start_q=None):
    engine = case.make_engine()
    objective = make_crossing_objective(engine, case.states, name, settings, preset=preset)
    base = OptimizerSettings(initial_hessian="diagonal", max_iterations=150)
    opt = Optimizer(objective, CartesianCoordinates(2, project_external=False),
                    settings=optimizer_settings_for(objective.search, base),
                    convergence=ConvergenceSettings.preset("normal"))
    start = case.start if start_q is None else case.start.with_coords(
        case.start.coords_bohr + np.reshape(start_q, (2, 3)))
    result = opt.run(start)
    q = engine.displacement(result.geometry)
    return result, objective, q


@pytest.mark.parametrize("name,settings,q_tol", [
    ("projected", ProjectedSettings(plane="coupling"), 1e-4),
    ("projected", ProjectedSettings(plane="updated"), 1e-4),
    ("auto", None, 1e-4),
    ("penalty", PenaltySettings(gap_tol_eh=1e-4), 2e-3),
])
def test_conical_intersection_found(name, settings, q_tol):
    case = conical_case()
    result, objective, q = search(case, name, settings)
    assert result.converged, result.message
    assert result.gap_eh <= objective.settings.gap_tol_eh
    assert np.abs(q - case.crossing_q).max() < q_tol
    mean = np.mean(list(result.energies_eh.values()))
    assert mean == pytest.approx(case.crossing_energy_eh, abs=2e-4)
    assert result.evaluations < 60


@pytest.mark.parametrize("name,q_tol", [("spin", 1e-3), ("auto", 1e-3), ("penalty", 2e-3)])
def test_spin_crossing_found(name, q_tol):
    case = spin_case()
    result, objective, q = search(case, name, preset="tight")
    assert result.converged, result.message
    assert result.gap_eh <= 1e-4
    assert np.abs(q - case.crossing_q).max() < q_tol
    assert objective.search == ("spin" if name == "auto" else name)
    assert result.evaluations < 60


def test_penalty_and_projected_reach_the_same_point():
    case = conical_case()
    start = np.array([0.1, 0.2, -0.1, 0.05, 0.0, -0.2])
    _, _, q_pen = search(case, "penalty", PenaltySettings(gap_tol_eh=1e-4), start_q=start)
    _, _, q_proj = search(case, "projected", start_q=start)
    assert np.abs(q_pen - q_proj).max() < 2e-3


def test_penalty_weight_grows_only_while_the_gap_is_too_large():
    case = conical_case()
    result, objective, _ = search(case, "penalty", PenaltySettings(gap_tol_eh=1e-4))
    assert objective.sigma > 3.5 and objective.cycles >= 1
    assert objective.gap_reached and not objective.failed
    redefined = [r for r in result.history if "redefined" in r.message]
    assert len(redefined) == objective.cycles


def test_avoided_crossing_is_reported_not_hidden():
    case = avoided_case(0.01)
    result, objective, _ = search(case, "penalty")
    assert objective.failed and not objective.gap_reached
    assert result.gap_eh == pytest.approx(case.minimum_gap_eh, rel=0.05)
    assert any("failed" in w for w in objective.warnings)
    result, _, _ = search(case, "projected")
    assert not result.converged
