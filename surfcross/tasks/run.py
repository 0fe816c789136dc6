"""Running one optimization task: the shared driver behind relax and crossing searches."""

from __future__ import annotations

import logging
import threading
from typing import Any, Callable, Iterable, Mapping

from ..engine.base import MethodSpec
from ..geometry import Geometry
from ..io.results import result_dict
from ..errors import BackTransformError, EngineError, StateTrackingError
from ..optimize import OptimizationResult, Status
from ..states import StateLabel
from .common import RunOptions, TaskResult

__all__ = ["task_spec", "run_optimization", "finish_task", "STOP_REQUEST", "request_stop"]

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
        raise
    except (EngineError, StateTrackingError, BackTransformError) as exc:
        accepted = [r for r in getattr(optimizer, "history", ()) if r.accepted]
        if not accepted:
            raise  # nothing computed yet: the start geometry or the settings are at fault
        return _failed_result(optimizer, accepted[-1], exc)


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
    for w in warnings:
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
