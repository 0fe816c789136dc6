"""The optimizer loop on the shipped analytic surfaces (no PySCF).

The known minima of the surfaces are closed-form (quadratic and quartic bowls: their centres;
Rosenbrock: (1, ..., 1), a textbook fact also checked against scipy.optimize below).
"""

import dataclasses
import json

import numpy as np
import pytest
from scipy.optimize import minimize, rosen, rosen_der

from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.objectives.base import ObjectiveValue
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings, Status
from surfcross.optimize.settings import CURVATURE_POLICIES, HESSIAN_UPDATES
from surfcross.testing import SURFACES, AnalyticObjective

TIGHT = ConvergenceSettings.preset("tight")


def _setup(surface, **settings):
    obj = AnalyticObjective.from_surface(surface)
    coords = CartesianCoordinates(obj.natom, project_external=False)
    base = dict(initial_hessian="diagonal", max_iterations=150)
    base.update(settings)
    return obj, coords, OptimizerSettings(**base)


@pytest.mark.parametrize("surface", list(SURFACES.values()), ids=list(SURFACES))
@pytest.mark.parametrize("policy", CURVATURE_POLICIES)
@pytest.mark.parametrize("update", HESSIAN_UPDATES)
def test_contract_converges_to_known_minimum(update, policy, surface):
    obj, coords, settings = _setup(surface, hessian_update=update, curvature_policy=policy)
    records = []
    opt = Optimizer(obj, coords, settings=settings, convergence=TIGHT, observers=[records.append])
    res = opt.run(obj.geometry(surface.start))
    assert res.status is Status.CONVERGED, res.message
    x = obj.variables(res.geometry)
    assert np.allclose(x, surface.minimum, atol=2e-4)
    assert res.value.value == pytest.approx(surface.minimum_value, abs=1e-8)
    # bookkeeping: every evaluation counted, observers saw every record, numbering 0..n
    assert res.evaluations == obj.evaluations
    assert len(records) == len(res.history)
    accepted = [r.iteration for r in res.history if r.accepted]
    assert accepted == list(range(res.iterations + 1))
    assert all(r.criteria for r in res.history)
    assert res.history[-1].converged
    # accepted values never rise by more than the tolerance (or the documented floor case)
    values = [r.value.value for r in res.history if r.accepted]
    rises = np.diff(values) > settings.energy_rise_tolerance
    assert rises.sum() <= len(res.warnings)


def test_valley_matches_scipy_rosenbrock():
    # The shipped valley is scipy.optimize.rosen / 20 (reference library), and our minimum
    # agrees with scipy's BFGS from the same start.
    surf = SURFACES["valley"]
    for x in (surf.start, np.array([0.3, -0.7]), np.array([2.0, 3.5])):
        assert surf.function(x) == pytest.approx(rosen(x) / 20.0, rel=1e-14)
        assert np.allclose(surf.gradient(x), rosen_der(x) / 20.0, rtol=1e-13)
    ref = minimize(rosen, surf.start, jac=rosen_der, method="BFGS", options={"gtol": 1e-9})
    obj, coords, settings = _setup(surf)
    res = Optimizer(obj, coords, settings=settings, convergence=TIGHT).run(obj.geometry(surf.start))
    assert np.allclose(obj.variables(res.geometry), ref.x, atol=2e-4)


def test_4d_valley_matches_scipy():
    surf = SURFACES["valley_4d"]
    x = np.array([0.4, -0.2, 1.1, 0.9])
    assert surf.function(x) == pytest.approx(rosen(x) / 40.0, rel=1e-14)
    assert np.allclose(surf.gradient(x), rosen_der(x) / 40.0, rtol=1e-13)


def test_rejected_step_is_reported_and_retried_from_the_old_point():
    # quartic bowl, start 0.3 bohr from the centre, soft start Hessian and a 1 bohr trust
    # radius: the first step overshoots to 0.7 bohr on the far side and the value rises.
    surf = SURFACES["quartic"]
    start = surf.minimum + np.array([0.3, 0.0, 0.0])
    obj, coords, settings = _setup(surf, diagonal_curvature=0.05, trust_radius=1.0)
    records = []
    res = Optimizer(obj, coords, settings=settings, convergence=TIGHT,
                    observers=[records.append]).run(obj.geometry(start))
    assert res.converged
    first_reject = next(i for i, r in enumerate(records) if not r.accepted)
    rej = records[first_reject]
    assert rej.iteration == 1 and rej.value.value > records[0].value.value
    # documented shrink rule: min(tau, |s|) / 4
    assert rej.trust_radius == pytest.approx(min(1.0, rej.step_length) / 4)
    retry = records[first_reject + 1]
    # the retry starts from the start point again: its step is measured from there
    assert np.allclose(retry.geometry.coords_bohr - retry.step_bohr, records[0].geometry.coords_bohr)
    assert retry.step_length <= rej.trust_radius + 1e-9
    assert np.allclose(obj.variables(res.geometry), surf.minimum, atol=2e-4)


class RejectingObjective(AnalyticObjective):
    """Asks the optimizer to reject trial geometries with x0 < 0 (e.g. a state switch)."""

    def evaluate(self, geometry):
        v = super().evaluate(geometry)
        if self.variables(geometry)[0] < 0.0:
            return dataclasses.replace(v, reject_step=True)
        return v


def test_objective_can_reject_trials():
    surf = SURFACES["bowl"]  # minimum at x0 = 0.5; a very soft start Hessian aims past x0 = 0
    obj = RejectingObjective(surf.function, surf.gradient, 3)
    coords = CartesianCoordinates(1, project_external=False)
    settings = OptimizerSettings(initial_hessian="diagonal", diagonal_curvature=0.005,
                                 trust_radius=1.5, trust_max=1.5)
    res = Optimizer(obj, coords, settings=settings, convergence=TIGHT).run(
        obj.geometry([0.9, -0.3, 0.2]))
    rejected = [r for r in res.history if not r.accepted]
    assert rejected[0].iteration == 1 and rejected[0].value.reject_step
    assert "objective rejected" in rejected[0].message
    assert all(obj.variables(r.geometry)[0] >= 0 for r in res.history if r.accepted)
    assert res.converged and np.allclose(obj.variables(res.geometry), surf.minimum, atol=2e-4)


def test_stopiteration_from_an_observer_stops_cleanly():
    surf = SURFACES["valley"]
    obj, coords, settings = _setup(surf)

    def stop_at_three(rec):
        if rec.iteration == 3 and rec.accepted:
            raise StopIteration

    res = Optimizer(obj, coords, settings=settings, observers=[stop_at_three]).run(
        obj.geometry(surf.start))
    assert res.status is Status.STOPPED and not res.converged
    assert res.iterations == 3 and res.history[-1].iteration == 3


def test_other_observer_errors_propagate():
    surf = SURFACES["bowl"]
    obj, coords, settings = _setup(surf)
    opt = Optimizer(obj, coords, settings=settings)

    def broken(rec):
        raise RuntimeError("disk full")

    opt.attach(broken)
    with pytest.raises(RuntimeError, match="disk full"):
        opt.run(obj.geometry(surf.start))


def test_step_limit_is_a_status_not_an_exception():
    surf = SURFACES["valley"]
    obj, coords, settings = _setup(surf, max_iterations=3)
    res = Optimizer(obj, coords, settings=settings).run(obj.geometry(surf.start))
    assert res.status is Status.STEP_LIMIT and res.iterations == 3
    assert "3 iterations" in res.message


def test_iterate_yields_start_record_first():
    surf = SURFACES["bowl"]
    obj, coords, settings = _setup(surf)
    opt = Optimizer(obj, coords, settings=settings)
    gen = opt.iterate(obj.geometry(surf.start))
    first = next(gen)
    assert first.iteration == 0 and first.accepted and first.step_length == 0.0
    assert [c.name for c in first.criteria] == ["max force", "rms force"]


class RedefiningObjective(AnalyticObjective):
    """After the first convergence, moves the bowl's centre (like raising a penalty weight)."""

    def __init__(self):
        self.centre = np.array([0.5, -0.3, 0.2])
        super().__init__(lambda x: float(0.5 * (x - self.centre) @ (x - self.centre)),
                         lambda x: x - self.centre, 3, name="moving bowl")
        self.redefined = False

    def after_convergence(self, value):
        if self.redefined:
            return False
        self.redefined = True
        self.centre = np.array([0.8, 0.1, -0.4])
        return True


def test_after_convergence_redefinition_continues_with_fresh_hessian():
    obj = RedefiningObjective()
    coords = CartesianCoordinates(1, project_external=False)
    settings = OptimizerSettings(initial_hessian="diagonal", diagonal_curvature=0.3)
    res = Optimizer(obj, coords, settings=settings, convergence=TIGHT).run(obj.geometry([0, 0, 0]))
    assert res.converged and obj.redefined
    assert np.allclose(obj.variables(res.geometry), [0.8, 0.1, -0.4], atol=1e-4)
    redo = [r for r in res.history if "redefined" in r.message]
    assert len(redo) == 1 and redo[0].step_length == 0.0
    # same geometry as the converged record before it, re-evaluated with the new definition
    before = res.history[res.history.index(redo[0]) - 1]
    assert np.array_equal(redo[0].geometry.coords_bohr, before.geometry.coords_bohr)
    assert redo[0].evaluations == before.evaluations + 1
    # Hessian reset to the initial model (0.3 times the identity)
    assert np.allclose(redo[0].resume_state["hessian"], 0.3 * np.eye(3))
    assert res.evaluations == obj.evaluations


def _jsonable(obj):
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, dict):
        return {k: _jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_jsonable(v) for v in obj]
    if isinstance(obj, np.generic):
        return obj.item()
    return obj


@pytest.mark.parametrize("resume_at", [4, 9])
def test_resume_continues_exactly(resume_at):
    surf = SURFACES["valley"]
    obj, coords, settings = _setup(surf)
    full = Optimizer(obj, coords, settings=settings).run(obj.geometry(surf.start))
    assert full.converged
    rec = [r for r in full.history if r.accepted][resume_at]
    state = json.loads(json.dumps(_jsonable(dict(rec.resume_state))))

    obj2, coords2, _ = _setup(surf)
    opt2 = Optimizer(obj2, coords2, settings=settings)
    opt2.load_state_dict(state)
    resumed = opt2.run(rec.geometry)
    first = resumed.history[0]
    assert first.iteration == rec.iteration and first.message == "resumed"
    assert first.trust_radius == rec.trust_radius
    assert np.array_equal(first.resume_state["hessian"], rec.resume_state["hessian"])
    assert resumed.converged and resumed.iterations == full.iterations
    assert resumed.value.value == pytest.approx(full.value.value, abs=1e-6)
    assert np.allclose(resumed.geometry.coords_bohr, full.geometry.coords_bohr, atol=1e-10)
    # one extra evaluation: the resume point is evaluated again
    assert resumed.evaluations == full.evaluations + 1


def test_resume_rejects_a_foreign_state():
    from surfcross.errors import CheckpointError

    surf = SURFACES["valley"]
    obj, coords, settings = _setup(surf)
    res = Optimizer(obj, coords, settings=settings).run(obj.geometry(surf.start))
    state = dict(res.history[2].resume_state)
    big = AnalyticObjective.from_surface(SURFACES["valley_4d"])
    opt = Optimizer(big, CartesianCoordinates(2, project_external=False), settings=settings)
    opt.load_state_dict(state)
    with pytest.raises(CheckpointError, match="another molecule"):
        opt.run(big.geometry(SURFACES["valley_4d"].start))
    with pytest.raises(CheckpointError, match="lacks"):
        opt.load_state_dict({"format": 1})


def test_non_finite_start_is_an_engine_error():
    from surfcross.errors import EngineError

    obj = AnalyticObjective(lambda x: float("nan"), lambda x: np.zeros(3), 3)
    opt = Optimizer(obj, CartesianCoordinates(1, project_external=False))
    with pytest.raises(EngineError, match="non-finite"):
        opt.run(obj.geometry([0.0, 0.0, 0.0]))


def test_bad_objective_is_an_input_error():
    from surfcross.errors import InputError

    with pytest.raises(InputError, match="evaluate"):
        Optimizer(object(), CartesianCoordinates(1))


def test_max_atom_step_caps_every_atom():
    surf = SURFACES["tilted_bowl"]
    obj, coords, settings = _setup(surf, max_atom_step=0.05, trust_radius=1.0)
    res = Optimizer(obj, coords, settings=settings, convergence=TIGHT).run(obj.geometry(surf.start))
    assert res.converged
    per_atom = [np.linalg.norm(r.step_bohr, axis=1).max() for r in res.history]
    assert max(per_atom) <= 0.05 + 1e-12


def test_value_is_objective_value_type():
    surf = SURFACES["bowl"]
    obj, coords, settings = _setup(surf)
    res = Optimizer(obj, coords, settings=settings).run(obj.geometry(surf.start))
    assert isinstance(res.value, ObjectiveValue)
    assert res.energies_eh == {"bowl": res.value.value}


class RebuildingCartesian(CartesianCoordinates):
    """Asks for one rebuild after the second accepted geometry (like a bond that formed)."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.calls = 0
        self.rebuilds = [0]

    def needs_rebuild(self, coords_bohr):
        self.calls += 1
        return self.calls == 2 and self.rebuilds[0] == 0

    def rebuilt(self, coords_bohr):
        self.rebuilds[0] += 1
        new = RebuildingCartesian(self.natom, project_external=False)
        new.rebuilds = self.rebuilds
        new.calls = 99
        return new


def test_coordinate_rebuild_reinitializes_the_hessian():
    surf = SURFACES["tilted_bowl"]
    obj = AnalyticObjective.from_surface(surf)
    coords = RebuildingCartesian(2, project_external=False)
    settings = OptimizerSettings(initial_hessian="diagonal", diagonal_curvature=0.7)
    opt = Optimizer(obj, coords, settings=settings, convergence=TIGHT)
    res = opt.run(obj.geometry(surf.start))
    assert coords.rebuilds == [1] and opt.coords is not coords
    rec2 = [r for r in res.history if r.accepted][2]
    assert np.allclose(rec2.resume_state["hessian"], 0.7 * np.eye(6))
    assert res.converged and np.allclose(obj.variables(res.geometry), surf.minimum, atol=2e-4)


class FragileCartesian(CartesianCoordinates):
    """Refuses steps longer than 0.2 bohr, as a failing back-transformation would."""

    def displace(self, coords_bohr, dq):
        from surfcross.errors import BackTransformError

        if np.linalg.norm(dq) > 0.2:
            raise BackTransformError("step too long for the back-transformation")
        return super().displace(coords_bohr, dq)


def test_failed_displacement_shortens_the_step():
    surf = SURFACES["bowl"]
    obj = AnalyticObjective.from_surface(surf)
    settings = OptimizerSettings(initial_hessian="diagonal", trust_radius=0.6)
    res = Optimizer(obj, FragileCartesian(1, project_external=False), settings=settings,
                    convergence=TIGHT).run(obj.geometry(surf.start))
    assert res.converged
    assert any("trial step failed" in w for w in res.warnings)
    assert all(r.step_length <= 0.2 + 1e-12 for r in res.history)
    assert np.allclose(obj.variables(res.geometry), surf.minimum, atol=2e-4)
