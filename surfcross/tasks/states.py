"""Vertical states at one geometry, as a task (for job files and the demo)."""

from __future__ import annotations

from typing import Any

from ..analysis.vertical import vertical_summary
from ..engine.base import Evaluation, MethodSpec
from ..geometry import Geometry
from ..io.report import method_limits, render_report
from ..io.results import write_json_atomic
from .build import build_engine
from .common import TaskResult, prepare_method

__all__ = ["compute_states"]


def compute_states(geometry: Geometry, method: MethodSpec, *, run_dir: Any = None,
                   engine: Any = None, source: str = "") -> TaskResult:
    """Energies, oscillator strengths and transitions of all states at ``geometry``."""
    own = engine is None
    if own:  # impossible requests before any SCF; roots capped at the excitations there are
        method = prepare_method(method, [], geometry)
    engine = engine or build_engine(method, run_dir)
    try:
        evaluation: Evaluation = engine.states(geometry)
    finally:
        if own:
            engine.close()
    summary = vertical_summary(evaluation, method, source=source)
    data = {"task": "states", "converged": True, "status": "finished", "iterations": 0,
            "evaluations": 1, "states": [str(s.label) for s in evaluation.states],
            "energies_eh": evaluation.energies(), "adiabatic_energies_eh": evaluation.energies(),
            "followed_roots": {str(s.label): str(s.label) for s in evaluation.states},
            "gap_ev": None, "final_xyz": "final.xyz",
            "method": {**method.to_dict(), "charge": geometry.charge, "spin": geometry.spin},
            "search": None, "warnings": list(evaluation.warnings), "vertical": summary}
    if run_dir is not None:
        run_dir.final_xyz.write_text(geometry.to_xyz("vertical states geometry"))
        write_json_atomic(run_dir.result_json, data)
        text = render_report(data, sections=[("Vertical states", _table(summary["states"]))],
                             limits=method_limits(data["method"]))  # no crossing here
        run_dir.report_md.write_text(text, encoding="utf-8")
    return TaskResult(task="states", converged=True, status="finished", message="",
                      geometry=geometry, evaluation=evaluation,
                      states=tuple(data["states"]), method=method, evaluations=1,
                      warnings=tuple(evaluation.warnings), data=data,
                      run_dir=None if run_dir is None else run_dir.path)


def _table(rows: list[dict[str, Any]]) -> str:
    """Markdown table of the vertical states (energies, wavelengths, strengths, transitions)."""
    def num(value: Any, fmt: str) -> str:
        return "-" if value is None else format(value, fmt)

    lines = ["| state | E / Eh | excitation / eV | wavelength / nm | f | <S^2> | transitions |",
             "| --- | --- | --- | --- | --- | --- | --- |"]
    for r in rows:
        lines.append(f"| {r['label']} | {r['energy_eh']:.8f} | {r['excitation_ev']:.3f} | "
                     f"{num(r['wavelength_nm'], '.1f')} | {num(r['oscillator_strength'], '.4f')} | "
                     f"{num(r['spin_square'], '.3f')} | {', '.join(r['transitions'])} |")
    return "\n".join(lines)
