"""RMSD between two structures of one molecule, minimized over rigid motions and over the
exchange of equivalent atoms (atoms of the same element).

Finding the best exchange and the best rotation together is a hard problem; the usual
practical answer, used here, alternates the two from several starting orientations:

1. orient both structures: centroid at the origin, then the principal axes of each
   (4 proper rotations per pair of axis frames, 8 with mirror images) -- plus the
   identity orientation;
2. for each orientation, assign the atoms of each element to those of the other structure by
   the Hungarian algorithm on squared distances (:func:`scipy.optimize.linear_sum_assignment`);
3. superpose with that assignment (Kabsch), reassign, and repeat until the assignment stops
   changing;
4. keep the smallest RMSD found.

The result is an upper bound of the true minimum that is exact whenever the structures are
close to each other up to rotation and exchange, which is the case that deduplication needs.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np
from scipy.optimize import linear_sum_assignment

from ..errors import InputError
from ..geometry import kabsch_align

__all__ = ["permuted_rmsd", "assign_equivalent_atoms"]

_MAX_ROUNDS = 20


def _axes(x: np.ndarray) -> np.ndarray:
    """Principal axes (rows) of centred coordinates, as a proper rotation."""
    _, _, vt = np.linalg.svd(x, full_matrices=True)
    if np.linalg.det(vt) < 0:
        vt[2] *= -1
    return vt


def _frames(mirror: bool) -> list[np.ndarray]:
    signs = [(1, 1, 1), (1, -1, -1), (-1, 1, -1), (-1, -1, 1)]
    if mirror:
        signs += [(-1, -1, -1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]
    return [np.diag(s).astype(float) for s in signs]


def assign_equivalent_atoms(symbols: Sequence[str], mobile: np.ndarray,
                            reference: np.ndarray) -> np.ndarray:
    """Permutation ``p`` (mobile atom p[i] goes with reference atom i) minimizing the summed
    squared distances, atoms exchanged only within one element."""
    symbols = list(symbols)
    perm = np.arange(len(symbols))
    for element in sorted(set(symbols)):
        idx = np.array([i for i, s in enumerate(symbols) if s == element])
        if len(idx) < 2:
            continue
        cost = ((reference[idx][:, None, :] - mobile[idx][None, :, :]) ** 2).sum(-1)
        rows, cols = linear_sum_assignment(cost)
        perm[idx[rows]] = idx[cols]
    return perm


def _refine(symbols: Sequence[str], mobile: np.ndarray, reference: np.ndarray,
            mirror: bool) -> tuple[float, np.ndarray]:
    perm = assign_equivalent_atoms(symbols, mobile, reference)
    best = (np.inf, perm)
    for _ in range(_MAX_ROUNDS):
        moved = mobile[perm]
        aligned, value = kabsch_align(moved, reference)
        if mirror:
            flipped, value_m = kabsch_align(moved * np.array([1.0, 1.0, -1.0]), reference)
            if value_m < value:
                aligned, value = flipped, value_m
        if value < best[0] - 1e-14:
            best = (value, perm.copy())
        new = assign_equivalent_atoms(symbols, aligned, reference)
        # ``aligned`` is already in the order ``perm``: compose the two
        new = perm[new]
        if np.array_equal(new, perm):
            break
        perm = new
    return best


def permuted_rmsd(symbols: Sequence[str], a: np.ndarray, b: np.ndarray, *,
                  mirror: bool = False) -> tuple[float, np.ndarray]:
    """(RMSD, permutation) of structure ``a`` onto ``b`` (same units as the input).

    Atoms of one element may be exchanged; ``mirror`` also allows improper rotations (mirror
    images count as the same structure). ``a[perm]`` is the best-matching order of ``a``.
    """
    a = np.asarray(a, float)
    b = np.asarray(b, float)
    if a.shape != b.shape or a.shape != (len(symbols), 3):
        raise InputError(f"cannot compare structures of shapes {a.shape} and {b.shape}")
    a0, b0 = a - a.mean(0), b - b.mean(0)
    starts = [a0]
    if len(symbols) > 2:
        ra, rb = _axes(a0), _axes(b0)
        starts += [a0 @ ra.T @ f @ rb for f in _frames(mirror)]
    best = (np.inf, np.arange(len(symbols)))
    for start in starts:
        value, perm = _refine(symbols, start, b0, mirror)
        if value < best[0]:
            best = (value, perm)
    return float(best[0]), best[1]
