"""Warm versus cold starts of the engine on one optimization path.

One relax run records its accepted geometries; the path is then replayed twice with fresh
engines, warm starts on and off, computing at every geometry the states and the gradient of the
followed root (the root the relax run followed there). Per step: SCF cycles, response
(Davidson) iterations and wall time of states + gradient. The path is the same for both, so
the difference is the start guess alone.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Any

import numpy as np

from surfcross.engine import MethodSpec, make_engine
from surfcross.geometry import Geometry
from surfcross.tasks import RunOptions, prepare_method, relax

from bench_common import quiet


REPEATS = 2


@dataclass(frozen=True)
class PathCase:
    name: str
    start: Geometry
    state: str
    method: MethodSpec
    quick: bool = True


def _path(case: PathCase) -> tuple[list[Geometry], list[str]]:
    result = relax(case.start, case.state, case.method, options=RunOptions(), progress=False)
    records = [r for r in result.optimization.history if r.accepted]
    geometries = [r.geometry for r in records]
    roots = [str(r.value.info.get("root", case.state)) for r in records]
    return geometries, roots


def _replay_once(spec: MethodSpec, path: list[Geometry], roots: list[str], warm: bool):
    engine = make_engine(spec, warm_start=warm)
    scf, resp, times = [], [], []
    for geometry, root in zip(path, roots):
        start = time.perf_counter()
        ev = engine.states(geometry)
        engine.gradients(ev, [root])
        times.append(time.perf_counter() - start)
        scf.append(int(ev.scf_cycles))
        resp.append(int(ev.response_iterations))
    engine.close()
    return scf, resp, times


def _replay(spec: MethodSpec, path: list[Geometry], roots: list[str], warm: bool) -> dict:
    """Counts of one replay; wall times per point: the fastest of REPEATS replays (shared
    machines add noise of the size of the effect at 0.1-0.3 s per point)."""
    runs = [_replay_once(spec, path, roots, warm) for _ in range(REPEATS)]
    scf, resp = runs[0][0], runs[0][1]
    times = np.min([r[2] for r in runs], axis=0)
    # the first point has nothing to start from in either mode: compare the steps after it
    tail = slice(1, None)
    return {"points": len(path), "scf_cycles_per_step": float(np.mean(scf[tail])),
            "response_iterations_per_step": float(np.mean(resp[tail])),
            "wall_s_per_step": float(np.mean(times[tail]))}


def run_path(case: PathCase) -> dict[str, Any]:
    with quiet():
        try:
            path, roots = _path(case)
            if len(path) < 3:
                raise RuntimeError(f"the relax run gave only {len(path)} points")
            spec = prepare_method(case.method, [case.state])
            cold = _replay(spec, path, roots, warm=False)
            warm = _replay(spec, path, roots, warm=True)
        except Exception as exc:  # reported, not raised
            return {"case": case.name, "error": str(exc)}
    return {"case": case.name, "state": case.state, "cold": cold, "warm": warm,
            "speedup": cold["wall_s_per_step"] / warm["wall_s_per_step"]}
