"""Continue an interrupted run from its checkpoint."""

from __future__ import annotations

from pathlib import Path
from typing import Any, Mapping

from ..engine.base import MethodSpec
from ..errors import CheckpointError
from ..geometry import Geometry
from ..io.run import RunDirectory
from .common import RunOptions, TaskResult

__all__ = ["resume", "method_from_dict"]


def method_from_dict(data: Mapping[str, Any]) -> MethodSpec:
    fields = MethodSpec.__dataclass_fields__
    clean = {k: (tuple(v) if isinstance(v, list) else v) for k, v in data.items() if k in fields}
    return MethodSpec(**clean)


def resume(path: str | Path, *, progress: bool = True) -> TaskResult:
    """Reopen the run directory ``path`` and continue its task where the checkpoint left it.

    The continued run uses the saved Hessian, trust radius, objective state (tracked roots,
    penalty weight, branching-plane vector) and step numbering, so its answer equals that of an
    uninterrupted run.
    """
    run_dir = RunDirectory.reopen(path)
    data = run_dir.previous
    task = dict(run_dir.task or {})
    kind = task.get("kind")
    if data.geometry is None or not data.resume_state:
        raise CheckpointError(f"{path}: the checkpoint holds no completed step to resume from; "
                              "start the task again")
    if (Path(path) / "result.json").exists():
        raise CheckpointError(f"{path}: this run already finished (result.json exists)")
    method = method_from_dict(task["method"])
    options = RunOptions.from_dict(task.get("options", {}))
    start: Geometry = data.geometry
    if kind == "relax":
        from .relax import relax

        return relax(start, task["states"][0], method, options=options, run_dir=run_dir,
                     progress=progress, resume_state=dict(data.resume_state))
    if kind == "cross":
        from .crossing import find_crossing

        return find_crossing(start, task["states"], method, search=task.get("search", "auto"),
                             options=options, run_dir=run_dir, progress=progress,
                             resume_state=dict(data.resume_state),
                             gap_tolerance_eh=task.get("gap_tolerance_eh"))
    raise CheckpointError(f"{path}: cannot resume a task of kind {kind!r}")
