"""Small pieces shared by the workflows: finding a state again by overlap, summing stages.

Nothing here prints or writes files; the workflows compose these with the tasks layer.
"""

from __future__ import annotations

import logging
from typing import Any, Iterable, Sequence

from ..engine.base import Evaluation
from ..states import StateLabel, parse_state
from ..tracking.assign import assign_columns
from ..tracking.tracker import normalized_overlaps

__all__ = ["carrier_root", "connect_roots", "stage_summary", "merge_warnings", "LOW_OVERLAP"]

log = logging.getLogger(__name__)

#: below this normalized overlap a link between two geometries is reported as uncertain
#: (the same threshold the tracker uses by default)
LOW_OVERLAP = 0.5


def carrier_root(engine: Any, reference: Evaluation, label: StateLabel | str,
                 other: Evaluation) -> tuple[StateLabel, float]:
    """The root at ``other`` that carries the character of ``label`` at ``reference``.

    Uses the optimal one-to-one assignment of the overlap matrix of the label's manifold.
    Returns the root and its normalized overlap |O| (1 = same character). With a single
    state in the manifold the label itself is returned with overlap 1.
    """
    label = parse_state(label)
    rows = [s.label for s in reference.manifold(label.manifold)]
    cols = [s.label for s in other.manifold(label.manifold)]
    if len(rows) <= 1 or len(cols) <= 1:
        return label, 1.0
    matrix = engine.overlaps(reference, other).get(label.manifold)
    if matrix is None:
        return label, float("nan")
    norm, _ = normalized_overlaps(matrix)
    column = assign_columns(norm)[rows.index(label)]
    return cols[column], float(abs(norm[rows.index(label), column]))


def connect_roots(engine: Any, evaluations: Sequence[Evaluation]) -> tuple[
        dict[str, list[str]], list[str]]:
    """Follow every state of the first evaluation through the sequence by overlap.

    Each curve is named by its adiabatic label at the first point and keeps that state's
    character: at every point it takes the root assigned to it (optimal assignment of the
    normalized overlaps between neighbouring points, per manifold).

    Returns
    -------
    roots
        {label at the first point: [adiabatic root label at each point]}.
    notes
        Warnings about uncertain links (normalized overlap below :data:`LOW_OVERLAP`).
    """
    first = evaluations[0]
    roots: dict[str, list[str]] = {str(s.label): [str(s.label)] for s in first.states}
    notes: list[str] = []
    for k in range(1, len(evaluations)):
        prev, new = evaluations[k - 1], evaluations[k]
        matrices = engine.overlaps(prev, new)
        for name, curve in roots.items():
            manifold = parse_state(curve[-1]).manifold
            rows = [str(s.label) for s in prev.manifold(manifold)]
            cols = [str(s.label) for s in new.manifold(manifold)]
            matrix = matrices.get(manifold)
            if matrix is None or len(rows) <= 1:
                curve.append(curve[-1])
                continue
            norm, _ = normalized_overlaps(matrix)
            pairs = assign_columns(norm)
            row = rows.index(curve[-1])
            col = pairs.get(row, row)
            curve.append(cols[col])
            if abs(norm[row, col]) < LOW_OVERLAP:
                notes.append(f"point {k}: the state followed from {name} has only overlap "
                             f"{abs(norm[row, col]):.2f} with {cols[col]}; the connection is "
                             "uncertain (more points or more roots help)")
    return roots, notes


def stage_summary(name: str, result: Any) -> dict[str, Any]:
    """One line of the stage table: status, steps, evaluations and sub-run folder."""
    return {"stage": name, "converged": bool(result.converged), "status": result.status,
            "iterations": int(result.iterations), "evaluations": int(result.evaluations),
            "run_dir": None if result.run_dir is None else str(result.run_dir.name)}


def merge_warnings(*groups: Iterable[str]) -> list[str]:
    """Warnings of several stages, in order, each once."""
    out: list[str] = []
    for group in groups:
        for w in group:
            if w not in out:
                out.append(w)
    return out

