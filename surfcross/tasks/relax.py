"""Minimize the energy of one state (ground or excited), following it by overlap."""

from __future__ import annotations

import logging
from typing import Any, Callable, Iterable

from ..analysis.curvature import check_curvature, displace_along
from ..engine.base import MethodSpec
from ..errors import SurfcrossError
from ..geometry import Geometry
from ..objectives.single import SingleStateObjective
from ..states import StateLabel, parse_state
from .build import build_coordinates, build_engine, build_optimizer, tracking_options
from .common import RunOptions, TaskResult, method_warnings, prepare_method
from ..units import BOHR_IN_ANGSTROM
from .run import final_stability, finish_task, run_optimization, task_spec

__all__ = ["relax"]

log = logging.getLogger(__name__)

#: how far to step along an imaginary mode before minimizing again (bohr)
IMAGINARY_DISPLACEMENT = 0.1
MAX_RESTARTS = 2


def relax(geometry: Geometry, state: str | StateLabel, method: MethodSpec, *,
          options: RunOptions = RunOptions(), run_dir: Any = None,
          observers: Iterable[Callable] = (), progress: bool = True, engine: Any = None,
          resume_state: dict | None = None) -> TaskResult:
    """Minimize ``state`` (e.g. 'S0', 'S1', 'T1') from ``geometry``.

    Parameters
    ----------
    geometry
        Start geometry (its charge and spin are used).
    state
        The state to follow, labelled by adiabatic order at the start.
    method
        Electronic-structure method; roots are raised to cover the state plus two.
    options
        Coordinates, convergence, tracking, constraints, curvature check.
    run_dir
        A :class:`surfcross.io.RunDirectory` for the run record, or None.
    engine
        An engine to reuse (else one is built from ``method``).

    Returns
    -------
    TaskResult
        ``converged`` False with status 'step limit reached' is a normal outcome, not an error.
    """
    label = parse_state(state)
    # impossible requests: before any SCF (a given engine, e.g. a model, knows its own states)
    spec = prepare_method(method, [label], geometry if engine is None else None)
    if engine is not None:
        return _relax(geometry, label, spec, options, run_dir, observers, progress, engine,
                      resume_state)
    with build_engine(spec, run_dir, warm_start=options.warm_start,
                      follow_instability=options.follow_instability) as own:
        return _relax(geometry, label, spec, options, run_dir, observers, progress, own,
                      resume_state)


def _relax(geometry: Geometry, label: StateLabel, spec: MethodSpec, options: RunOptions,
           run_dir: Any, observers: Iterable[Callable], progress: bool, engine: Any,
           resume_state: dict | None) -> TaskResult:
    warnings = method_warnings(spec, [label])
    data: dict[str, Any] = {}
    start = geometry if resume_state else _at_targets(geometry, options)
    for attempt in range(MAX_RESTARTS + 1):
        objective = SingleStateObjective(engine, label, tracking=tracking_options(options))
        coords = build_coordinates(start, options)
        optimizer = build_optimizer(objective, coords, options)
        spec_dict = task_spec("relax", geometry, [label], spec, options)
        result = run_optimization(optimizer, start, run_dir if attempt == 0 else None, spec_dict,
                                  observers=observers, progress=progress,
                                  resume_state=resume_state if attempt == 0 else None)
        reorderings = list(getattr(objective, "reorderings", []))
        if not (options.curvature_check and result.converged):
            break
        root = result.value.info.get("root", str(label))
        curvature = check_curvature(engine, result.geometry, root)
        data["curvature"] = curvature.to_dict()
        if curvature.is_minimum:
            break
        note = (f"{label} has {curvature.imaginary.size} imaginary mode(s) "
                f"({', '.join(f'{f:.0f}i' for f in -curvature.imaginary)} cm^-1) at the "
                "converged point: not a minimum")
        if not options.follow_imaginary or attempt == MAX_RESTARTS:
            warnings.append(note + "; rerun with --follow-imaginary to displace along it")
            break
        warnings.append(note + "; displaced along the mode and minimized again")
        mode = curvature.modes[int(curvature.frequencies_cm.argmin())]
        start = displace_along(result.geometry, mode, IMAGINARY_DISPLACEMENT)
    if result.value.evaluation is not None:
        warnings += list(result.value.evaluation.warnings)
    warnings += final_stability(engine, result)
    return finish_task("relax", result, [label], spec, run_dir, warnings=warnings, data=data,
                       reorderings=reorderings)


def _at_targets(geometry: Geometry, options: RunOptions) -> Geometry:
    """The start geometry with every held coordinate that has a target value set to it.

    Minimizing from a point where a held coordinate is far from its target mixes the drive to
    the target with the energy decrease, and the trust region then rejects every step; the
    displacement (the same one a relaxed scan makes) removes that conflict. When no direct
    displacement exists, the minimization drives the coordinate itself.
    """
    from ..workflows.coordinate import drive_coordinate  # workflows import tasks

    held = [c for c in options.constraints if c.kind != "atom" and c.target is not None]
    for c in held:
        c.check(geometry.natom)
        value = c.target * BOHR_IN_ANGSTROM if c.kind == "bond" else c.target
        try:
            geometry = drive_coordinate(geometry, c.atoms, value, options.constraints)
        except SurfcrossError as exc:
            log.info("could not set %s %s to %g before minimizing (%s): the minimization "
                     "drives it", c.kind, "-".join(str(a + 1) for a in c.atoms), value, exc)
    return geometry
