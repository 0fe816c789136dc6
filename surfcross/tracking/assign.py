"""Matching states between two geometries from their overlap matrix.

Rows of an overlap matrix are the states at the previous accepted geometry, columns the states
computed now. Single states are matched by an optimal one-to-one assignment on |O|
(``scipy.optimize.linear_sum_assignment``), so two followed states never land on the same root.
A pair of states (crossing searches) is followed as a two-dimensional subspace: inside the pair
the states may mix freely (they do near an intersection), only leakage out of the pair matters.

Confidence checks (thresholds from :class:`surfcross.tracking.tracker.TrackingOptions`):

* assigned |O| below ``min_overlap`` (default 0.5): the state changed character abruptly
  ("lost"); a step that long should be shortened;
* best and second-best |O| of the row closer than ``ambiguity`` (0.1): ambiguous match,
  typically near-degenerate states;
* sum of |O|^2 over the row below ``min_window`` (0.8): part of the state is no longer among
  the computed roots; compute more roots.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass

import numpy as np
from scipy.optimize import linear_sum_assignment

from ..errors import StateTrackingError

__all__ = ["Match", "PairMatch", "assign_columns", "match_row", "match_pair", "row_flags"]


@dataclass(frozen=True)
class Match:
    """Where one previous state went.

    Attributes
    ----------
    row, column
        Index of the state at the previous geometry and of the root it maps to now.
    overlap
        Signed overlap <previous | new>.
    second_best
        Largest |O| of the row outside the assigned column (0 when there is none).
    window
        Sum of |O|^2 over the row: the fraction of the previous state found among the
        computed roots.
    """

    row: int
    column: int
    overlap: float
    second_best: float
    window: float

    @property
    def confidence(self) -> float:
        return abs(self.overlap)

    @property
    def phase(self) -> int:
        """+1 or -1: the sign that makes the new state continue the previous one."""
        return -1 if self.overlap < 0 else 1


@dataclass(frozen=True)
class PairMatch:
    """Where a pair of previous states went.

    ``columns`` are the two new roots in increasing index order (= energy order inside one
    manifold); ``matches`` link each previous row to one of them (for phases);
    ``confidence`` is the smallest singular value of the 2 x 2 overlap block on the chosen
    roots, and ``captured`` the fraction of the pair's weight that those roots hold.
    """

    columns: tuple[int, int]
    matches: tuple[Match, Match]
    confidence: float
    captured: float


def assign_columns(overlap: np.ndarray) -> dict[int, int]:
    """Optimal one-to-one assignment {row: column} maximizing the total |O|."""
    o = np.abs(np.asarray(overlap, dtype=float))
    if o.size == 0:
        return {}
    rows, cols = linear_sum_assignment(-o)
    return {int(r): int(c) for r, c in zip(rows, cols)}


def _match(overlap: np.ndarray, row: int, column: int) -> Match:
    line = np.abs(overlap[row])
    others = np.delete(line, column)
    return Match(row=row, column=column, overlap=float(overlap[row, column]),
                 second_best=float(others.max()) if others.size else 0.0,
                 window=float(np.sum(line**2)))


def match_row(overlap: np.ndarray, row: int) -> Match:
    """Match previous state ``row`` within the optimal assignment of all previous states.

    If the assignment leaves the row without a partner (fewer roots now than before), the
    root of largest |O| is used.
    """
    overlap = np.asarray(overlap, dtype=float)
    if not 0 <= row < overlap.shape[0]:
        raise StateTrackingError(f"previous root index {row} is outside the overlap matrix "
                                 f"({overlap.shape[0]} states)")
    if overlap.shape[1] == 0:
        raise StateTrackingError("no states were computed at the new geometry")
    column = assign_columns(overlap).get(row)
    if column is None:
        column = int(np.argmax(np.abs(overlap[row])))
    return _match(overlap, row, column)


def match_pair(overlap: np.ndarray, rows: tuple[int, int]) -> PairMatch:
    """Follow the two-state subspace of previous states ``rows``.

    Picks the two new roots whose 2 x 2 block holds the most of the pair's weight
    (largest Frobenius norm; ties broken by the larger smallest singular value).
    """
    overlap = np.asarray(overlap, dtype=float)
    r1, r2 = rows
    if r1 == r2:
        raise StateTrackingError("a pair needs two different states")
    if overlap.shape[1] < 2:
        raise StateTrackingError("fewer than two states were computed at the new geometry")
    block = overlap[[r1, r2]]
    best = None
    for c1, c2 in itertools.combinations(range(overlap.shape[1]), 2):
        sub = block[:, [c1, c2]]
        sv = np.linalg.svd(sub, compute_uv=False)
        key = (round(float(np.sum(sub**2)), 12), float(sv[-1]))
        if best is None or key > best[0]:
            best = (key, (c1, c2), float(sv[-1]))
    (weight, _), columns, smallest = best
    sub = np.abs(block[:, list(columns)])
    inner = linear_sum_assignment(-sub)[1]  # which chosen column continues each row
    matches = tuple(_match(overlap, r, columns[int(k)]) for r, k in zip(rows, inner))
    return PairMatch(columns=columns, matches=matches, confidence=smallest, captured=weight / 2)


def row_flags(name: str, old: str, new: str, match: Match, *, min_overlap: float,
              ambiguity: float, min_window: float) -> list[str]:
    """Human-readable warnings for one match (empty when everything is clear)."""
    flags = []
    if match.confidence < min_overlap:
        flags.append(f"{name}: lost its character between geometries (best overlap "
                     f"{match.confidence:.2f} with root {new}, below {min_overlap:.2f}); "
                     "the step was too long or the electronic structure changed abruptly")
    elif match.confidence - match.second_best < ambiguity:
        flags.append(f"{name}: ambiguous match (overlaps {match.confidence:.2f} and "
                     f"{match.second_best:.2f}); near-degenerate states, check the assignment")
    if match.window < min_window:
        flags.append(f"{name}: only {100 * match.window:.0f}% of the state found among the "
                     f"computed roots (it was root {old}); compute more roots")
    return flags
