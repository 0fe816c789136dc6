"""Vertical states at one geometry, as a task (for job files and the demo)."""

from __future__ import annotations

from typing import Any

from ..analysis.vertical import vertical_summary
from ..engine.base import Evaluation, MethodSpec
from ..geometry import Geometry
from ..io.results import write_json_atomic
from .build import build_engine
from .common import TaskResult

__all__ = ["compute_states"]


def compute_states(geometry: Geometry, method: MethodSpec, *, run_dir: Any = None,
                   engine: Any = None, source: str = "") -> TaskResult:
    """Energies, oscillator strengths and transitions of all states at ``geometry``."""
    own = engine is None
    engine = engine or build_engine(method, run_dir)
    try:
        evaluation: Evaluation = engine.states(geometry)
    finally:
        if own:
            engine.close()
    summary = vertical_summary(evaluation, method, source=source)
    data = {"task": "states", "converged": True, "status": "finished", "iterations": 0,
            "evaluations": 1, "states": [str(s.label) for s in evaluation.states],
            "energies_eh": evaluation.energies(), "gap_ev": None, "final_xyz": "final.xyz",
            "method": {**method.to_dict(), "charge": geometry.charge, "spin": geometry.spin},
            "search": None, "warnings": list(evaluation.warnings), "vertical": summary}
    if run_dir is not None:
        run_dir.final_xyz.write_text(geometry.to_xyz("vertical states geometry"))
        write_json_atomic(run_dir.result_json, data)
    return TaskResult(task="states", converged=True, status="finished", message="",
                      geometry=geometry, evaluation=evaluation,
                      states=tuple(data["states"]), method=method, evaluations=1,
                      warnings=tuple(evaluation.warnings), data=data,
                      run_dir=None if run_dir is None else run_dir.path)
