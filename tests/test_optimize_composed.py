"""The composed-objective path (working gradient that is not the gradient of a scalar).

Scenario of our own: minimize a tilted bowl f on the plane n.x = b, with the signed distance
d = n.x - b playing the role of the gap. The working gradient is 2 d n + P grad f with
P = 1 - n n^T and curvature 2 along n (the gradient of |d| has length 1), the same structure
as a gradient-projection crossing search. The constrained minimum is checked against the
Lagrange conditions solved directly and against scipy's SLSQP (reference library).
"""

import numpy as np
import pytest
from scipy.optimize import minimize

from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.errors import InputError
from surfcross.objectives.base import Criterion, ObjectiveValue, SubspaceModel
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings, Status
from surfcross.optimize.settings import HESSIAN_UPDATES
from surfcross.testing import AnalyticObjective

A = np.array([[1.0, 0.2, 0.0], [0.2, 0.5, 0.1], [0.0, 0.1, 0.8]])
C = np.array([0.4, -0.6, 0.3])
N = np.array([1.0, 1.0, 1.0]) / np.sqrt(3.0)
B = 0.5
#: merit f + w |d|: an exact l1 penalty whose minimum is the constrained minimum whenever
#: w exceeds the Lagrange multiplier (0.41 here; Nocedal & Wright, Numerical Optimization,
#: ch. 17, recalled from memory)
MERIT_WEIGHT = 2.0


class PlaneObjective(AnalyticObjective):
    def __init__(self):
        super().__init__(lambda x: float(0.5 * (x - C) @ A @ (x - C)), lambda x: A @ (x - C), 3,
                         name="bowl on a plane")

    def evaluate(self, geometry):
        x = self.variables(geometry)
        self.evaluations += 1
        f = self.function(x)
        d = float(N @ x - B)
        P = np.eye(3) - np.outer(N, N)
        pg = P @ self.grad(x)
        return ObjectiveValue(
            value=f, gradient=(2.0 * d * N + pg).reshape(1, 3), exact_gradient=False,
            merit=f + MERIT_WEIGHT * abs(d), gap_eh=abs(d), convergence_gradient=pg.reshape(1, 3),
            subspace=SubspaceModel(directions=N[None, :], curvatures=np.array([2.0])),
            extra_criteria=(Criterion("gap", abs(d), 1e-6, "Eh"),))


def _reference():
    kkt = np.block([[A, N[:, None]], [N[None, :], np.zeros((1, 1))]])
    sol = np.linalg.solve(kkt, np.concatenate([A @ C, [B]]))
    assert abs(sol[3]) < MERIT_WEIGHT
    return sol[:3]


@pytest.mark.parametrize("update", HESSIAN_UPDATES)
def test_composed_path_reaches_the_constrained_minimum(update):
    ref = _reference()
    slsqp = minimize(lambda x: 0.5 * (x - C) @ A @ (x - C), np.zeros(3), method="SLSQP",
                     constraints=[{"type": "eq", "fun": lambda x: N @ x - B}],
                     options={"ftol": 1e-14})
    assert np.allclose(slsqp.x, ref, atol=1e-6)

    obj = PlaneObjective()
    settings = OptimizerSettings(initial_hessian="diagonal", trust_radius=0.1, hessian_update=update)
    res = Optimizer(obj, CartesianCoordinates(1, project_external=False), settings=settings,
                    convergence=ConvergenceSettings.preset("tight")).run(obj.geometry([1.5, 1.0, -0.8]))
    assert res.status is Status.CONVERGED, res.message
    assert np.allclose(obj.variables(res.geometry), ref, atol=1e-4)
    assert res.gap_eh < 1e-6
    assert any(c.name == "gap" for c in res.history[-1].criteria)
    # the trust radius grew from 0.1 only through runs of good boundary steps
    assert max(r.trust_radius for r in res.history) > 0.1
    # merit never rose beyond the documented tolerance on accepted steps
    merits = [r.value.merit_value for r in res.history if r.accepted]
    assert np.all(np.diff(merits) <= settings.merit_rise_tolerance)


def test_composed_merit_rise_is_rejected():
    obj = PlaneObjective()
    # a first step far across the plane raises the merit and must be rejected
    settings = OptimizerSettings(initial_hessian="diagonal", diagonal_curvature=0.01,
                                 trust_radius=1.0)

    class Overshoot(PlaneObjective):
        def evaluate(self, geometry):
            v = super().evaluate(geometry)
            if self.evaluations > 1:
                return v
            # at the start, claim a tiny curvature along n: the first step overshoots
            sub = SubspaceModel(directions=N[None, :], curvatures=np.array([0.2]))
            return ObjectiveValue(**{**v.__dict__, "subspace": sub})

    obj = Overshoot()
    start = _reference() + 0.1 * N  # 0.1 bohr off the plane
    res = Optimizer(obj, CartesianCoordinates(1, project_external=False), settings=settings,
                    convergence=ConvergenceSettings.preset("normal")).run(obj.geometry(start))
    rejected = [r for r in res.history if not r.accepted]
    assert rejected and "merit rose" in rejected[0].message
    assert res.converged
    assert np.allclose(obj.variables(res.geometry), _reference(), atol=1e-3)


def test_subspace_objective_needs_cartesian_coordinates():
    class Renamed(CartesianCoordinates):
        name = "some internal set"

    obj = PlaneObjective()
    opt = Optimizer(obj, Renamed(1, project_external=False))
    with pytest.raises(InputError, match="Cartesian"):
        opt.run(obj.geometry([1.5, 1.0, -0.8]))
