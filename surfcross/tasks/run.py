"""Running one optimization task: the shared driver behind relax and crossing searches."""

from __future__ import annotations

import logging
import threading
from typing import Any, Callable, Iterable, Mapping

from ..engine.base import MethodSpec
from ..geometry import Geometry
from ..io.results import reorderings as reordering_notes
from ..io.results import result_dict
from ..errors import BackTransformError, EngineError, StateTrackingError
from ..optimize import OptimizationResult, Status
from ..states import StateLabel
from .common import RunOptions, TaskResult

__all__ = ["task_spec", "run_optimization", "finish_task", "final_stability", "STOP_REQUEST",
           "request_stop", "INTERRUPTED"]

#: result.json status of a run stopped by the user (Ctrl-C) or a stop request
INTERRUPTED = "interrupted"
#: marks run-level messages of the engine's stability analysis (collected from every step)
_STABILITY_TAG = "(internal stability analysis)"

log = logging.getLogger(__name__)

#: set (e.g. by the command line's Ctrl-C handler) to end the running optimization cleanly
#: after its current step, once that step is in the checkpoint
STOP_REQUEST = threading.Event()


def request_stop() -> None:
    """Ask the running optimization to stop after the step in progress (thread-safe)."""
    STOP_REQUEST.set()


def _stop_when_asked(record: Any) -> None:
    """Observer (attached after the run directory's writers): raises KeyboardInterrupt at the
    first step record after a stop request, so the interruption never cuts a step in half."""
    if STOP_REQUEST.is_set():
        raise KeyboardInterrupt("stop requested")


def task_spec(kind: str, geometry: Geometry, labels: Iterable[StateLabel], spec: MethodSpec,
              options: RunOptions, **extra: Any) -> dict[str, Any]:
    """The task definition stored in the checkpoint (enough to rebuild and resume the run)."""
    out = {"kind": kind, "states": [str(x) for x in labels], "method": spec.to_dict(),
           "options": options.to_dict(), "geometry": geometry}
    out.update(extra)
    return out


def run_optimization(optimizer: Any, geometry: Geometry, run_dir: Any, spec: Mapping[str, Any],
                     *, observers: Iterable[Callable] = (), progress: bool = True,
                     resume_state: Mapping[str, Any] | None = None) -> OptimizationResult:
    """Attach the run directory's observers (and the caller's) and run the optimizer."""
    STOP_REQUEST.clear()
    if run_dir is not None:
        if resume_state is None:
            run_dir.save_task(spec)
        for obs in run_dir.observers(progress=progress):
            optimizer.attach(obs)
    elif progress:
        from ..io.progress import ProgressWriter

        optimizer.attach(ProgressWriter())
    for obs in observers:
        optimizer.attach(obs)
    optimizer.attach(_stop_when_asked)
    if resume_state:
        optimizer.load_state_dict(resume_state)
    try:
        return optimizer.run(geometry)
    except KeyboardInterrupt as exc:  # tell the command line which folder to resume
        if run_dir is not None and getattr(exc, "run_dir", None) is None:
            exc.run_dir = run_dir.path
            _write_interrupted(optimizer, run_dir, spec)
        raise
    except (EngineError, StateTrackingError, BackTransformError) as exc:
        accepted = [r for r in getattr(optimizer, "history", ()) if r.accepted]
        if not accepted:
            raise  # nothing computed yet: the start geometry or the settings are at fault
        return _failed_result(optimizer, accepted[-1], exc)


def _write_interrupted(optimizer: Any, run_dir: Any, spec: Mapping[str, Any]) -> None:
    """result.json, final.xyz and report.md of a run stopped by the user, at its last
    accepted step, with status 'interrupted' and the command that continues it."""
    history = tuple(getattr(optimizer, "history", ()))
    accepted = [r for r in history if r.accepted]
    if not accepted:
        return
    last = accepted[-1]
    command = f"surfcross resume {run_dir.path}"
    result = OptimizationResult(
        status=Status.STOPPED, geometry=last.geometry, value=last.value,
        message=f"interrupted after step {last.iteration}; continue with: {command}",
        iterations=last.iteration, evaluations=int(getattr(optimizer, "evaluations", 0)),
        history=history, warnings=tuple(getattr(optimizer, "warnings", ())))
    try:
        out = result_dict(task=str(spec.get("kind", "task")), result=result,
                          states=list(spec.get("states", ())), method=spec.get("method", {}),
                          search=spec.get("search"))
        out.update(status=INTERRUPTED, converged=False, resume_command=command)
        out["warnings"] = list(dict.fromkeys(out["warnings"] + stability_warnings(history)))
        run_dir.finish(out, last.geometry, criteria=last.criteria,
                       reorderings=reordering_notes(history))
    except Exception as exc:  # the interruption must still reach the user
        log.warning("could not write the record of the interrupted run: %s", exc)


def stability_warnings(history: Iterable[Any]) -> list[str]:
    """Distinct SCF-stability warnings of the engine evaluations of accepted steps."""
    found: list[str] = []
    for rec in history:
        evaluation = getattr(rec.value, "evaluation", None) if rec.accepted else None
        for w in getattr(evaluation, "warnings", ()) or ():
            if _STABILITY_TAG in w and w not in found:
                found.append(w)
    return found


def final_stability(engine: Any, result: OptimizationResult) -> list[str]:
    """Stability analysis of the reference at the end point (when the engine has one)."""
    check = getattr(engine, "check_reference", None)
    if check is None or result.value.evaluation is None:
        return []
    return list(check(result.value.evaluation))


def _failed_result(optimizer: Any, last: Any, exc: Exception) -> OptimizationResult:
    """A run that broke off mid-way (SCF failure, lost state, ...) as a 'failed' outcome at
    its last accepted step, so the run record is still written and the checkpoint resumable."""
    message = " ".join(str(exc).split())
    log.warning("run stopped at step %d: %s", last.iteration, message)
    return OptimizationResult(
        status=Status.FAILED, geometry=last.geometry, value=last.value,
        message=f"stopped after step {last.iteration}: {message}",
        iterations=last.iteration, evaluations=int(getattr(optimizer, "evaluations", 0)),
        history=tuple(optimizer.history), warnings=tuple(getattr(optimizer, "warnings", ())))


def finish_task(kind: str, result: OptimizationResult, labels: Iterable[StateLabel],
                method: MethodSpec, run_dir: Any, *, search: str | None = None,
                warnings: Iterable[str] = (), data: Mapping[str, Any] | None = None,
                branching: Mapping[str, Any] | None = None,
                sections: Iterable[tuple[str, str]] = (),
                reorderings: Iterable[str] = ()) -> TaskResult:
    """Build the TaskResult and write the run record (result.json, final.xyz, report)."""
    labels = [str(x) for x in labels]
    extra = dict(data or {})
    if branching is not None:
        extra["branching"] = dict(branching)
    out = result_dict(task=kind, result=result, states=labels, method=method, search=search,
                      extra=extra)
    method_dict = out["method"]
    method_dict.update({"charge": result.geometry.charge, "spin": result.geometry.spin})
    seen = list(out["warnings"])
    for w in list(warnings) + stability_warnings(result.history):
        if w not in seen:
            seen.append(w)
    out["warnings"] = seen
    if run_dir is not None:
        criteria = result.history[-1].criteria if result.history else ()
        out = run_dir.finish(out, result.geometry, criteria=criteria, branching=branching,
                             reorderings=list(reorderings), sections=list(sections))
    return TaskResult(
        task=kind, converged=result.converged, status=result.status.value, message=result.message,
        geometry=result.geometry, evaluation=result.value.evaluation, states=tuple(labels),
        method=method, iterations=result.iterations, evaluations=result.evaluations,
        search=search, warnings=tuple(seen), data=out, optimization=result,
        run_dir=None if run_dir is None else run_dir.path)
