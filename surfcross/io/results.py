"""The machine-readable outcome of a task: ``result.json``.

JSON has no arrays, enums, tuples-as-keys or NaN, so :func:`to_jsonable` turns the objects a
task produces (numpy arrays and scalars, :class:`Geometry`, :class:`StateLabel`, enums,
dataclasses, paths) into plain lists, dicts, strings and numbers; non-finite floats become
``null``. :func:`result_dict` builds the keys every task reports (see ``RESULT_KEYS``) from an
:class:`OptimizationResult`.
"""

from __future__ import annotations

import dataclasses
import enum
import json
import math
import os
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from ..geometry import Geometry
from ..states import StateLabel
from ..units import HARTREE_IN_EV

__all__ = [
    "RESULT_KEYS",
    "to_jsonable",
    "dumps",
    "write_json_atomic",
    "complete_result",
    "result_dict",
    "all_state_energies",
    "followed_roots",
    "reorderings",
]

#: keys every result.json holds (values may be null where they do not apply, e.g. gap_ev).
#: ``energies_eh`` is keyed by the followed (task) labels, the names at the start geometry;
#: ``adiabatic_energies_eh`` holds every computed state in energy order at the final geometry
#: and ``followed_roots`` maps each followed label to its adiabatic root there.
RESULT_KEYS = ("task", "converged", "iterations", "evaluations", "states", "energies_eh",
               "adiabatic_energies_eh", "followed_roots", "gap_ev", "final_xyz", "method",
               "search", "warnings")


def _key(key: Any) -> str:
    if isinstance(key, tuple):
        return "-".join(str(k) for k in key)
    if isinstance(key, enum.Enum):
        return str(key.value)
    return str(key)


def to_jsonable(obj: Any) -> Any:
    """Plain JSON-able copy of ``obj`` (dicts, lists, str, int, float, bool, None)."""
    if obj is None or isinstance(obj, (bool, str, int)):
        return obj
    if isinstance(obj, float):
        return obj if math.isfinite(obj) else None
    if isinstance(obj, np.generic):
        return to_jsonable(obj.item())
    if isinstance(obj, np.ndarray):
        return [to_jsonable(v) for v in obj.tolist()] if obj.ndim else to_jsonable(obj.item())
    if isinstance(obj, enum.Enum):
        return to_jsonable(obj.value)
    if isinstance(obj, (StateLabel, Path)):
        return str(obj)
    if isinstance(obj, Geometry):
        return {"symbols": list(obj.symbols), "coords_angstrom": to_jsonable(obj.coords_angstrom),
                "charge": obj.charge, "spin": obj.spin}
    if isinstance(obj, Mapping):
        return {_key(k): to_jsonable(v) for k, v in obj.items()}
    if hasattr(obj, "to_dict") and callable(obj.to_dict):
        return to_jsonable(obj.to_dict())
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: to_jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, (list, tuple, set, frozenset)):
        items = sorted(obj, key=str) if isinstance(obj, (set, frozenset)) else obj
        return [to_jsonable(v) for v in items]
    raise TypeError(f"cannot write an object of type {type(obj).__name__} to JSON")


def dumps(obj: Any) -> str:
    """Pretty JSON text (two-space indent, key order kept, final newline)."""
    return json.dumps(to_jsonable(obj), indent=2, allow_nan=False) + "\n"


def write_json_atomic(path: str | os.PathLike, obj: Any) -> Path:
    """Write ``obj`` as pretty JSON; the old file stays intact until the new one is complete."""
    path = Path(path)
    text = dumps(obj)
    tmp = path.with_name(path.name + ".partial")
    with open(tmp, "w", encoding="utf-8") as fh:
        fh.write(text)
        fh.flush()
        os.fsync(fh.fileno())
    os.replace(tmp, path)
    return path


def complete_result(result: Mapping[str, Any], final_xyz: str = "final.xyz") -> dict[str, Any]:
    """Copy of ``result`` with the optional contract keys filled (gap_ev, search: null;
    warnings: []; final_xyz). Raises ValueError naming required keys that are missing."""
    out = dict(result)
    out.setdefault("gap_ev", None)
    out.setdefault("search", None)
    out.setdefault("warnings", [])
    out["final_xyz"] = final_xyz
    missing = [k for k in RESULT_KEYS if k not in out]
    if missing:
        raise ValueError(f"result is missing the key(s) {', '.join(missing)}")
    return out


def followed_roots(value: Any) -> dict[str, str]:
    """{followed label: adiabatic label of the root carrying it} behind an ObjectiveValue.

    From the tracker's target -> root assignment when recorded, else the objective's
    ``info`` ('target'/'root'); a value without either maps each followed label to itself.
    """
    tracking = getattr(value, "tracking", None)
    assignment = dict(((getattr(tracking, "info", None) or {}).get("assignment") or {}))
    if assignment:
        return {str(t): str(r) for t, r in assignment.items()}
    targets, roots = getattr(tracking, "targets", ()), getattr(tracking, "roots", ())
    if len(targets) == 1 and len(roots) == 1:  # (pairs list their roots by energy)
        return {str(targets[0]): str(roots[0])}
    info = getattr(value, "info", None) or {}
    if "target" in info and "root" in info:
        return {str(info["target"]): str(info["root"])}
    return {str(k): str(k) for k in value.energies_eh}


def all_state_energies(value: Any) -> dict[str, float]:
    """{label: Eh} of every computed state behind an ObjectiveValue (adiabatic labels of its
    evaluation), falling back to the followed states when there is no evaluation."""
    evaluation = getattr(value, "evaluation", None)
    if evaluation is not None and hasattr(evaluation, "energies"):
        return {str(k): float(v) for k, v in evaluation.energies().items()}
    return {str(k): float(v) for k, v in value.energies_eh.items()}


def reorderings(history: Iterable[Any]) -> list[str]:
    """Human-readable notes for every accepted step at which a followed state moved to
    another adiabatic root (from ``record.value.tracking``).

    Uses the tracker's target -> root assignment when it is recorded (pairs list their roots
    by energy, so zipping targets with roots would mislabel them); falls back to the order of
    ``roots`` otherwise.
    """
    notes = []
    last: dict[str, str] = {}
    for rec in history:
        tracking = getattr(rec.value, "tracking", None)
        if not rec.accepted or tracking is None:
            continue
        assignment = dict((tracking.info or {}).get("assignment", {}))
        if not assignment:
            assignment = {str(t): str(r) for t, r in zip(tracking.targets, tracking.roots)}
            if tracking.previous_roots and not last:
                last = {str(t): str(p) for t, p in zip(tracking.targets, tracking.previous_roots)}
        moves = [f"{t} now root {r} (was {last[t]})" for t, r in assignment.items()
                 if t in last and last[t] != r]
        if moves:
            notes.append(f"step {rec.iteration}: " + "; ".join(moves))
        last = assignment
    return notes


def result_dict(*, task: str, result: Any, states: Sequence[str | StateLabel],
                method: Any, search: str | None = None,
                extra: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """The result.json content of an optimization task.

    Parameters
    ----------
    task
        Task kind ('relax', 'cross', ...).
    result
        The :class:`~surfcross.optimize.records.OptimizationResult`.
    states
        The followed (task) labels.
    method
        :class:`~surfcross.engine.base.MethodSpec` or its dict.
    search
        Name of the crossing search, for crossings.
    extra
        Task-specific keys added at the end (they may not replace contract keys).
    """
    value = result.value
    gap_eh = value.gap_eh
    warnings = list(result.warnings) + [f"state reordering at {n}" for n in reorderings(result.history)]
    out: dict[str, Any] = {
        "task": task,
        "converged": bool(result.converged),
        "status": result.status.value if isinstance(result.status, enum.Enum) else str(result.status),
        "message": result.message,
        "iterations": int(result.iterations),
        "evaluations": int(result.evaluations),
        "states": [str(s) for s in states],
        "energies_eh": {str(k): float(v) for k, v in value.energies_eh.items()},
        "adiabatic_energies_eh": all_state_energies(value),
        "followed_roots": followed_roots(value),
        "gap_eh": None if gap_eh is None else float(gap_eh),
        "gap_ev": None if gap_eh is None else float(gap_eh) * HARTREE_IN_EV,
        "method": method.to_dict() if hasattr(method, "to_dict") else dict(method),
        "search": search,
        "warnings": warnings,
    }
    for k, v in (extra or {}).items():
        if k in RESULT_KEYS:
            raise ValueError(f"extra result key {k!r} would replace a contract key")
        out[k] = v
    return out
