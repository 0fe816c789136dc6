"""Reading the records that chains leave behind: result.json of a task, summary.json of a job.

Every read of a run record in this package goes through these small functions, so a change of
the record format (for example of what ``energies_eh`` holds, or a new status) is followed in
one place. Nothing here computes science: it only picks numbers out of files.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Mapping

__all__ = ["read_json", "read_result", "read_job_summary", "followed_energies",
           "state_energies", "task_status", "ENDED_STATUSES", "is_converged", "crossing_energy",
           "gap_ev", "branching_kind"]

RESULT_FILE = "result.json"
SUMMARY_FILE = "summary.json"

#: statuses of a task whose record is final: rerunning the batch keeps it as it is (a run
#: stopped at its step limit is continued by the user with ``surfcross resume``, not by us)
ENDED_STATUSES = ("converged", "finished", "step limit reached", "failed", "not converged")


def read_json(path: str | Path) -> dict[str, Any] | None:
    """The JSON object in ``path``; None when missing, unreadable or not an object."""
    try:
        data = json.loads(Path(path).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) else None


def read_result(run_dir: str | Path) -> dict[str, Any] | None:
    """result.json of one task folder (None when the task did not finish)."""
    return read_json(Path(run_dir) / RESULT_FILE)


def read_job_summary(job_dir: str | Path) -> dict[str, Any] | None:
    """summary.json of a job folder (None when the job has not written one yet)."""
    return read_json(Path(job_dir) / SUMMARY_FILE)


def task_status(result: Mapping[str, Any]) -> str:
    """The status word of a result ('converged', 'finished', 'step limit reached', ...)."""
    status = result.get("status")
    if isinstance(status, str) and status:
        return status
    return "converged" if result.get("converged") else "not converged"


def is_converged(result: Mapping[str, Any]) -> bool:
    return bool(result.get("converged"))


def followed_energies(result: Mapping[str, Any]) -> dict[str, float]:
    """{label: Eh} of the states the task followed (named at the start, followed by
    overlap), at its final geometry: result.json's ``energies_eh``."""
    data = result.get("energies_eh")
    if not isinstance(data, Mapping):
        return {}
    return {str(k): float(v) for k, v in data.items() if v is not None}


def state_energies(result: Mapping[str, Any]) -> dict[str, float]:
    """{label: Eh} of every state computed at the final geometry, by energy order there
    (``adiabatic_energies_eh``; results without it list the followed states only)."""
    data = result.get("adiabatic_energies_eh") or result.get("energies_eh")
    if not isinstance(data, Mapping):
        return {}
    return {str(k): float(v) for k, v in data.items() if v is not None}


def crossing_energy(result: Mapping[str, Any]) -> float | None:
    """Mean energy of the two followed states of a crossing search (Eh)."""
    energies = list(followed_energies(result).values())
    if len(energies) != 2:
        return None
    return 0.5 * (energies[0] + energies[1])


def gap_ev(result: Mapping[str, Any]) -> float | None:
    value = result.get("gap_ev")
    return None if value is None else float(value)


def branching_kind(result: Mapping[str, Any]) -> dict[str, Any]:
    """The characterization of a crossing: kind, topography, paths, pitch, asymmetry, tilt,
    and the in-plane probe's verdict (entries missing from the record are None)."""
    b = result.get("branching") if isinstance(result.get("branching"), Mapping) else {}
    probe = result.get("probe") if isinstance(result.get("probe"), Mapping) else {}
    return {"kind": b.get("kind"), "topography": b.get("topography"), "paths": b.get("paths"),
            "pitch": b.get("pitch"), "asymmetry": b.get("asymmetry"), "tilt": b.get("tilt"),
            "probe": probe.get("verdict")}
