"""Minima side by side: our relax vs pyberny vs scipy BFGS in Cartesians, on one surface.

All three minimize the energy of the same followed state with the same metered engine
(:class:`surfcross.objectives.single.SingleStateObjective`, overlap tracking on), so the surface
is identical; only the optimizer differs. Counts are engine evaluations (geometries at which
states and the gradient were computed).

* ours: :func:`surfcross.tasks.relax` with default options ('auto' coordinates: redundant
  internals; 'normal' thresholds: max force 4.5e-4, rms force 3e-4 Eh/bohr, steps, energy);
* pyberny: its own loop and default thresholds (max gradient 4.5e-4, rms 1.5e-4, steps),
  fed our energies and gradients; pyberny is a general-purpose geometry optimizer (the one
  PySCF's geometry driver wraps); the runner uses it only if installed;
* scipy BFGS: :func:`scipy.optimize.minimize` (method 'BFGS') in flat Cartesians (bohr), with
  ``gtol`` 4.5e-4 Eh/bohr (its test is the largest gradient component).
"""

from __future__ import annotations

import logging
import time
from dataclasses import dataclass
from typing import Any, Callable

import numpy as np
from scipy.optimize import minimize

from surfcross.geometry import Geometry
from surfcross.objectives.single import SingleStateObjective
from surfcross.tasks import RunOptions, relax
from surfcross.units import BOHR_IN_ANGSTROM

from bench_common import MeteredEngine, quiet

MINIMUM_COLUMNS = ("ours", "pyberny", "scipy_bfgs")
MAX_EVALUATIONS = 150


@dataclass(frozen=True)
class MinimumCase:
    name: str
    make_engine: Callable[[], Any]
    state: str
    start: Geometry
    method: Any
    quick: bool = True
    note: str = ""


def berny_available() -> bool:
    try:
        import berny  # noqa: F401  (benchmark-only comparator)
    except ImportError:
        return False
    return True


def _ours(case: MinimumCase) -> dict[str, Any]:
    engine = MeteredEngine(case.make_engine())
    start = time.perf_counter()
    result = relax(case.start, case.state, case.method, options=RunOptions(),
                   progress=False, engine=engine)
    wall = time.perf_counter() - start
    m = engine.meter
    return {"converged": bool(result.converged), "status": result.status,
            "evaluations": m.states, "iterations": result.iterations,
            "energy_eh": float(next(iter(result.energies_eh.values()))),
            "wall_s": wall, "engine_s": m.engine_s, "overlaps_s": m.time_overlaps_s,
            "overhead_fraction": (wall - m.engine_s) / wall if wall > 0 else None,
            "overhead_without_overlaps": (wall - m.engine_s - m.time_overlaps_s) / wall
            if wall > 0 else None}


def _tracked(case: MinimumCase):
    """A metered engine and an objective that follows the state from point to point."""
    engine = MeteredEngine(case.make_engine())
    objective = SingleStateObjective(engine, case.state)

    def energy_gradient(coords_bohr: np.ndarray) -> tuple[float, np.ndarray]:
        geometry = case.start.with_coords(np.reshape(coords_bohr, case.start.coords_bohr.shape))
        value = objective.evaluate(geometry)
        objective.accept(value)  # these optimizers never reject a point: follow from here
        return float(value.value), np.asarray(value.gradient, float)

    return engine, energy_gradient


def _pyberny(case: MinimumCase) -> dict[str, Any]:
    from berny import Berny, geomlib

    engine, energy_gradient = _tracked(case)
    quiet_log = logging.getLogger("surfcross.benchmarks.pyberny")  # its notes off the screen
    quiet_log.setLevel(logging.ERROR)
    optimizer = Berny(geomlib.Geometry(list(case.start.symbols), case.start.coords_angstrom),
                      maxsteps=MAX_EVALUATIONS, logger=quiet_log)
    energy = None
    for geom in optimizer:
        coords = np.asarray(geom.coords, float) / BOHR_IN_ANGSTROM
        energy, gradient = energy_gradient(coords)
        optimizer.send((energy, gradient))
    return {"converged": bool(optimizer.converged), "status": "converged"
            if optimizer.converged else "step limit", "evaluations": engine.meter.states,
            "iterations": engine.meter.states, "energy_eh": energy}


def _scipy_bfgs(case: MinimumCase) -> dict[str, Any]:
    engine, energy_gradient = _tracked(case)

    def fun(x: np.ndarray) -> tuple[float, np.ndarray]:
        e, g = energy_gradient(x)
        return e, g.ravel()

    res = minimize(fun, case.start.coords_bohr.ravel(), jac=True, method="BFGS",
                   options={"gtol": 4.5e-4, "maxiter": MAX_EVALUATIONS})
    return {"converged": bool(res.success), "status": str(res.message),
            "evaluations": engine.meter.states, "iterations": int(res.nit),
            "energy_eh": float(res.fun)}


_RUNNERS = {"ours": _ours, "pyberny": _pyberny, "scipy_bfgs": _scipy_bfgs}


def run_one(case: MinimumCase, name: str) -> dict[str, Any]:
    if name == "pyberny" and not berny_available():
        return {"converged": False, "status": "not installed", "evaluations": None,
                "iterations": None, "energy_eh": None, "wall_s": 0.0}
    start = time.perf_counter()
    with quiet() as caught:
        try:
            out = _RUNNERS[name](case)
        except Exception as exc:  # reported as a failed run
            out = {"converged": False, "status": f"error: {exc}", "evaluations": None,
                   "iterations": None, "energy_eh": None}
    out.setdefault("wall_s", time.perf_counter() - start)
    out["warnings"] = sorted(set(caught))[:5]
    return out


def run_jittered(case: MinimumCase, seeds=(1, 2, 3), size_angstrom: float = 1e-3) -> dict[str, Any]:
    """Our minimizer from starts jittered by up to ``size_angstrom`` (fixed seeds)."""
    from crossing_runs import SAME_POINT_EH, jitter

    runs = []
    for seed in seeds:
        moved = MinimumCase(name=case.name, make_engine=case.make_engine, state=case.state,
                            start=jitter(case.start, seed, size_angstrom), method=case.method)
        run = run_one(moved, "ours")
        runs.append({"seed": seed, **{k: run.get(k) for k in ("converged", "evaluations",
                                                               "energy_eh", "status")}})
    energies = [r["energy_eh"] for r in runs if r["energy_eh"] is not None]
    spread = (max(energies) - min(energies)) if len(energies) == len(runs) else None
    return {"case": case.name, "jitter_angstrom": size_angstrom, "runs": runs,
            "spread_eh": spread,
            "same_point": bool(all(r["converged"] for r in runs) and spread is not None
                               and spread <= SAME_POINT_EH)}


def run_case(case: MinimumCase, names=MINIMUM_COLUMNS) -> dict[str, Any]:
    return {"case": case.name, "state": case.state, "note": case.note,
            "runs": {name: run_one(case, name) for name in names}}
