"""Crossing searches side by side: our searches, a plain composed gradient, and scipy SLSQP.

Every search runs on the same engine (metered), from the same start, with the same state
tracking, and is charged one *evaluation* per geometry at which the engine computed states
(an evaluation always includes the gradients of both states).

Comparators written here, not in the package:

* ``plain``: the composed gradient G = 2 dE x-hat + (1 - x-hat x-hat^T) gbar, with a unit
  curvature along the gap direction x-hat (instead of our 2|x1|), no second branching-plane
  direction (no plane update, no couplings) and BFGS on the composed gradient; steps are
  judged on the same merit Ebar + mu dE as our searches.
* ``slsqp``: :func:`scipy.optimize.minimize` (method 'SLSQP') of the mean energy Ebar subject
  to the equality constraint gap = 0, in flat Cartesian coordinates (bohr), with analytic
  gradients (gbar and the gap gradient x1). Its count is the number of distinct geometries it
  asked for (function and gradient evaluations at one point share one engine call).

Every final point gets the same search-independent *residual seam gradient* (not counted in
the evaluations): for a one-dimensional crossing (different spin, the reference with a
response state, or states no vibration can couple) the largest component of
(1 - x-hat x-hat^T) gbar; for a conical intersection the largest component of gbar with x-hat
and the true second branching direction removed, the latter found by central differences of
grad(dE^2) along the part of gbar orthogonal to x-hat (two extra evaluations with gradients;
:func:`surfcross.analysis.probe.second_direction_check`). Searches are compared at points
where it is small.

``run_jittered`` repeats the default search from starts displaced by 1e-3 angstrom (fixed
seeds) to show that it reaches the same point from each of them.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from scipy.optimize import minimize

from surfcross.coords.cartesian import CartesianCoordinates
from surfcross.geometry import Geometry, rmsd
from surfcross.objectives.base import ObjectiveValue, SubspaceModel
from surfcross.objectives.crossing import (CrossingObjectiveBase, PairEvaluation, PairEvaluator,
                                           gap_criterion, merit_weight, unit)
from surfcross.objectives.projected import ProjectedSettings
from surfcross.objectives.searches import (choose_search, make_crossing_objective,
                                           optimizer_settings_for)
from surfcross.optimize import ConvergenceSettings, Optimizer, OptimizerSettings
from surfcross.analysis.probe import second_direction_check
from surfcross.tasks import RunOptions
from surfcross.tasks.build import build_coordinates
from surfcross.tasks.crossing import pair_symmetry
from surfcross.states import parse_states
from surfcross.units import BOHR_IN_ANGSTROM

from bench_common import MeteredEngine, quiet

SEARCH_COLUMNS = ("auto", "penalty", "projected", "plain", "slsqp")
GAP_TOL_EH = 1e-3  # the library's default gap tolerance (objectives.crossing.GAP_TOLERANCES)
JITTER_ANGSTROM = 1e-3
JITTER_SEEDS = (1, 2, 3)
SAME_POINT_EH = 5e-4  # mean energies of the jittered runs must agree to this


@dataclass(frozen=True)
class CrossingCase:
    """One crossing of the suite: how to build its engine, the pair and the start."""

    name: str
    make_engine: Callable[[], Any]
    states: tuple[str, str]
    start: Geometry
    is_model: bool = False
    quick: bool = True
    max_iterations: int = 100
    note: str = ""


class PlainComposedObjective(CrossingObjectiveBase):
    """Comparator: composed gradient without our refinements (see the module docstring)."""

    name = "crossing-plain"
    search = "plain"

    def __init__(self, engine: Any, states: Any, settings: ProjectedSettings | None = None,
                 **kwargs: Any) -> None:
        super().__init__(engine, states, settings or ProjectedSettings(plane="updated"),
                         **kwargs)
        self.mu: float | None = None
        self.x_prev: np.ndarray | None = None

    def _compose(self, pair: PairEvaluation):
        xhat, n1 = unit(pair.x1)
        if n1 < 1e-12 and self.x_prev is not None:
            xhat = self.x_prev
        if self.mu is None:
            self.mu = merit_weight(pair, None)
        gbar = pair.gbar
        projected = gbar - (gbar @ xhat) * xhat
        working = 2.0 * pair.gap * xhat + projected
        value = ObjectiveValue(
            value=pair.mean_energy, gradient=pair.shape(working), exact_gradient=False,
            merit=pair.mean_energy + self.mu * pair.gap, energies_eh=pair.energies(),
            gap_eh=pair.gap, convergence_gradient=pair.shape(projected),
            subspace=SubspaceModel(directions=np.array([xhat]), curvatures=np.array([1.0])),
            extra_criteria=(gap_criterion(pair.gap, self.settings.gap_tol_eh),),
            evaluation=pair.evaluation, tracking=pair.tracking, info=self._info(pair))
        return value, xhat

    def _commit(self, pair: PairEvaluation, payload: Any) -> None:
        self.x_prev = payload


def _coordinates(case: CrossingCase, composed: bool):
    if case.is_model:
        return CartesianCoordinates(case.start.natom, project_external=False)
    return build_coordinates(case.start, RunOptions(), composed=composed)


def _optimizer(case: CrossingCase, objective: Any, search: str) -> Optimizer:
    base = OptimizerSettings(max_iterations=case.max_iterations,
                             initial_hessian="diagonal" if case.is_model else "model")
    settings = optimizer_settings_for("projected" if search == "plain" else search, base)
    coords = _coordinates(case, composed=search != "penalty")
    return Optimizer(objective, coords, settings=settings,
                     convergence=ConvergenceSettings.preset("normal"))


def _optimizer_run(case: CrossingCase, search: str) -> dict[str, Any]:
    engine = MeteredEngine(case.make_engine())
    symmetry = None
    if search == "plain":
        objective = PlainComposedObjective(engine, case.states)
        resolved = "plain"
    else:
        if search == "auto":  # what the task does: the pair's irreps at the start decide too
            symmetry = pair_symmetry(engine, case.start, parse_states(list(case.states)))
        resolved = choose_search(case.states, search, getattr(engine, "spec", None), symmetry)
        objective = make_crossing_objective(engine, case.states, search, symmetry=symmetry)
    optimizer = _optimizer(case, objective, resolved)
    start = time.perf_counter()
    result = optimizer.run(case.start)
    run_s = time.perf_counter() - start
    energies = list(result.energies_eh.values())
    roots = (result.value.info or {}).get("roots")
    return {"search": resolved, "converged": bool(result.converged), "roots": roots,
            "status": result.status.value, "evaluations": engine.meter.states,
            "one_dimensional": resolved == "spin" if search == "auto" else None,
            "iterations": result.iterations,
            "gap_eh": None if result.gap_eh is None else float(result.gap_eh),
            "mean_energy_eh": float(np.mean(energies)) if energies else None,
            "geometry": result.geometry, "run_s": run_s, "engine_s": engine.meter.engine_s,
            "overlaps_s": engine.meter.time_overlaps_s}


def _signed_gap(pair: PairEvaluation, first: str) -> tuple[float, np.ndarray]:
    """E(second task state) - E(first) and its gradient: smooth across a 1-D crossing."""
    sign = 1.0 if pair.task_labels[0] == first else -1.0
    return sign * pair.gap, sign * pair.x1


def _slsqp_run(case: CrossingCase) -> dict[str, Any]:
    engine = MeteredEngine(case.make_engine())
    pairs = PairEvaluator(engine, case.states, project_external=not case.is_model)
    cache: dict[bytes, PairEvaluation] = {}
    shape = case.start.coords_bohr.shape

    def pair_at(x: np.ndarray) -> PairEvaluation:
        key = np.asarray(x, float).tobytes()
        if key not in cache:
            pair = pairs.evaluate(case.start.with_coords(np.reshape(x, shape)))
            pairs.accept(pair)  # follow the pair from the last point SLSQP asked for
            cache[key] = pair
        return cache[key]

    def mean(x):
        pair = pair_at(x)
        return pair.mean_energy, pair.gbar

    def gap(x):
        return _signed_gap(pair_at(x), case.states[0])[0]

    def gap_grad(x):
        return _signed_gap(pair_at(x), case.states[0])[1]

    x0 = case.start.coords_bohr.ravel()
    res = minimize(mean, x0, jac=True, method="SLSQP",
                   constraints=[{"type": "eq", "fun": gap, "jac": gap_grad}],
                   options={"maxiter": case.max_iterations, "ftol": 1e-9})
    final = pair_at(res.x)
    return {"search": "slsqp", "converged": bool(res.success) and final.gap <= GAP_TOL_EH,
            "roots": [str(final.lower), str(final.upper)],
            "status": str(res.message), "evaluations": engine.meter.states,
            "iterations": int(res.nit), "gap_eh": float(final.gap),
            "mean_energy_eh": float(final.mean_energy),
            "geometry": case.start.with_coords(np.reshape(res.x, shape))}


def seam_residual(case: CrossingCase, geometry: Geometry | None, one_dimensional: bool,
                  roots=None) -> float | None:
    """Search-independent residual seam gradient at a final point (see the module docstring).

    ``roots``: the adiabatic roots that carried the pair at that point (the followed states
    may sit on other roots there than their start labels)."""
    if geometry is None:
        return None
    engine = case.make_engine()
    pairs = PairEvaluator(engine, roots or case.states, project_external=not case.is_model)
    pair = pairs.evaluate(geometry)
    xhat = unit(pair.x1)[0]
    perp = pair.gbar - (pair.gbar @ xhat) * xhat
    if one_dimensional or np.linalg.norm(perp) < 1e-12:
        return float(np.abs(perp).max())
    check = second_direction_check(engine, pair.evaluation, (pair.lower, pair.upper), perp,
                                   xhat=xhat, external=pair.external)
    y = check.vector - (check.vector @ xhat) * xhat
    n = np.linalg.norm(y)
    if n < 1e-14:
        return float(np.abs(perp).max())
    y /= n
    return float(np.abs(perp - (perp @ y) * y).max())


def run_one(case: CrossingCase, search: str) -> dict[str, Any]:
    """One search on one case; failures are reported, never raised."""
    start = time.perf_counter()
    with quiet() as caught:
        try:
            out = _slsqp_run(case) if search == "slsqp" else _optimizer_run(case, search)
        except Exception as exc:  # a benchmark reports a crash as a failed search
            out = {"search": search, "converged": False, "status": f"error: {exc}",
                   "evaluations": None, "iterations": None, "gap_eh": None,
                   "mean_energy_eh": None, "geometry": None}
    out["wall_s"] = time.perf_counter() - start
    out["warnings"] = sorted(set(caught))[:5]
    return out


def _distance(a: Geometry | None, b: Geometry | None, is_model: bool) -> float | None:
    if a is None or b is None:
        return None
    return float(rmsd(a.coords_bohr, b.coords_bohr, align=not is_model))


def _one_dimensional(runs: dict[str, Any]) -> bool:
    flag = runs.get("auto", {}).get("one_dimensional")
    return bool(flag)


def run_case(case: CrossingCase, searches=SEARCH_COLUMNS) -> dict[str, Any]:
    """Every search on one case; distances are to the point the default search reached;
    every final point gets the search-independent residual seam gradient."""
    runs = {name: run_one(case, name) for name in searches}
    ref = runs.get("auto", {}).get("geometry")
    one_d = _one_dimensional(runs)
    for run in runs.values():
        geometry = run.pop("geometry")
        run["rmsd_to_auto_bohr"] = _distance(geometry, ref, case.is_model)
        with quiet():
            try:
                run["residual_eh_bohr"] = seam_residual(case, geometry, one_d, run.get("roots"))
            except Exception as exc:  # reported, never raised
                run["residual_eh_bohr"], run["residual_error"] = None, str(exc)
    return {"case": case.name, "states": list(case.states), "note": case.note, "runs": runs,
            "one_dimensional": one_d}


def jitter(geometry: Geometry, seed: int, size_angstrom: float = JITTER_ANGSTROM) -> Geometry:
    """``geometry`` with every coordinate moved by up to ``size_angstrom`` (uniform, seeded)."""
    rng = np.random.default_rng(seed)
    shift = size_angstrom / BOHR_IN_ANGSTROM * rng.uniform(-1.0, 1.0, geometry.coords_bohr.shape)
    return geometry.with_coords(geometry.coords_bohr + shift)


def run_jittered(case: CrossingCase, one_dimensional: bool,
                 seeds=JITTER_SEEDS) -> dict[str, Any]:
    """The default search from jittered starts: same point (mean energies within 5e-4 Eh)?"""
    runs = []
    for seed in seeds:
        moved = CrossingCase(name=case.name, make_engine=case.make_engine, states=case.states,
                             start=jitter(case.start, seed), is_model=case.is_model,
                             max_iterations=case.max_iterations)
        run = run_one(moved, "auto")
        geometry = run.pop("geometry", None)
        with quiet():
            try:
                run["residual_eh_bohr"] = seam_residual(moved, geometry, one_dimensional,
                                                        run.get("roots"))
            except Exception as exc:
                run["residual_eh_bohr"], run["residual_error"] = None, str(exc)
        runs.append({"seed": seed, **{k: run.get(k) for k in (
            "converged", "evaluations", "mean_energy_eh", "gap_eh", "residual_eh_bohr",
            "search", "status")}})
    energies = [r["mean_energy_eh"] for r in runs if r["mean_energy_eh"] is not None]
    spread = (max(energies) - min(energies)) if len(energies) == len(runs) else None
    same = bool(all(r["converged"] for r in runs) and spread is not None
                and spread <= SAME_POINT_EH)
    return {"case": case.name, "jitter_angstrom": JITTER_ANGSTROM, "runs": runs,
            "spread_eh": spread, "same_point": same}
