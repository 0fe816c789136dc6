"""Continue an interrupted run from its checkpoint."""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Mapping

from ..engine.base import MethodSpec
from ..errors import CheckpointError, InputError
from ..geometry import Geometry
from ..io.run import RunDirectory
from ..optimize.records import Status
from .common import RunOptions, TaskResult
from .run import INTERRUPTED

__all__ = ["resume", "method_from_dict"]


def method_from_dict(data: Mapping[str, Any]) -> MethodSpec:
    fields = MethodSpec.__dataclass_fields__
    clean = {k: (tuple(v) if isinstance(v, list) else v) for k, v in data.items() if k in fields}
    return MethodSpec(**clean)


def resume(path: str | Path, *, progress: bool = True, more_steps: int | None = None,
           engine: Any = None) -> TaskResult:
    """Reopen the run directory ``path`` and continue its task where the checkpoint left it.

    The continued run uses the saved Hessian, trust radius, objective state (tracked roots,
    penalty weight, branching-plane vector) and step numbering, so its answer equals that of an
    uninterrupted run.

    A run that stopped at its step limit (result.json with status 'step limit reached') is
    continued too, with a new budget of ``more_steps`` steps (default: the original limit);
    ``more_steps`` also extends the budget of an interrupted run. Converged or failed runs
    are not continued. ``engine``: an engine to use instead of one built from the saved
    method (e.g. an analytic model).
    """
    if more_steps is not None and more_steps < 1:
        raise InputError(f"the number of further steps must be >= 1, got {more_steps}")
    _check_unfinished(Path(path))
    run_dir = RunDirectory.reopen(path)
    data = run_dir.previous
    task = dict(run_dir.task or {})
    kind = task.get("kind")
    if data.geometry is None or not data.resume_state:
        raise CheckpointError(f"{path}: the checkpoint holds no completed step to resume from; "
                              "start the task again")
    method = method_from_dict(task["method"])
    options = RunOptions.from_dict(task.get("options", {}))
    if more_steps is not None or _status(Path(path)) == Status.STEP_LIMIT.value:
        budget = more_steps if more_steps is not None else options.max_iterations
        options = options.with_updates(max_iterations=data.iteration + budget)
    start: Geometry = data.geometry
    if kind == "relax":
        from .relax import relax

        return relax(start, task["states"][0], method, options=options, run_dir=run_dir,
                     progress=progress, resume_state=dict(data.resume_state), engine=engine)
    if kind == "cross":
        from .crossing import find_crossing

        return find_crossing(start, task["states"], method, search=task.get("search", "auto"),
                             options=options, run_dir=run_dir, progress=progress,
                             resume_state=dict(data.resume_state), engine=engine,
                             gap_tolerance_eh=task.get("gap_tolerance_eh"))
    raise CheckpointError(f"{path}: cannot resume a task of kind {kind!r}")


def _status(path: Path) -> str | None:
    """The status in a run folder's result.json (None without one)."""
    try:
        return json.loads((path / "result.json").read_text(encoding="utf-8")).get("status")
    except (OSError, ValueError, AttributeError):
        return None


def _check_unfinished(path: Path) -> None:
    """A run with result.json may only be continued when it stopped at its step limit or was
    interrupted."""
    if not (path / "checkpoint.h5").exists():
        inner = sorted(p.parent.name for p in path.glob("*/checkpoint.h5"))
        if inner:  # a job or workflow folder: its optimizations sit one level down
            raise CheckpointError(f"{path} holds several runs; resume one of them: "
                                  + ", ".join(str(path / name) for name in inner))
    if not (path / "result.json").exists():
        return
    status = _status(path)
    if status in (Status.STEP_LIMIT.value, INTERRUPTED):
        return
    if status == Status.CONVERGED.value:
        raise CheckpointError(f"{path}: this run already converged; nothing to continue")
    raise CheckpointError(f"{path}: this run ended with status {status!r}, not at its step "
                          "limit; start a new run from its final.xyz (with other settings)")
