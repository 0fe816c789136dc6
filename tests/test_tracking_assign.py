"""Matching states from overlap matrices (surfcross.tracking.assign), pure numpy.

References: exhaustive enumeration of all permutations (itertools) for the optimal
assignment; singular values from numpy.linalg.svd for the pair subspace; the thresholds
0.5 / 0.1 / 0.8 are the project's defaults (common practice for overlap-based tracking).
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from surfcross.errors import StateTrackingError
from surfcross.tracking.assign import (assign_columns, match_pair, match_row, row_flags)

OPTS = {"min_overlap": 0.5, "ambiguity": 0.1, "min_window": 0.8}


def rotation(n, seed):
    q, _ = np.linalg.qr(np.random.default_rng(seed).normal(size=(n, n)))
    return q


def test_assignment_equals_exhaustive_search():
    # optimal assignment: compare with brute force over all permutations
    for seed in range(5):
        o = rotation(5, seed)
        best = max(itertools.permutations(range(5)),
                   key=lambda p: sum(abs(o[i, p[i]]) for i in range(5)))
        got = assign_columns(o)
        assert [got[i] for i in range(5)] == list(best)


def test_signed_permutation_recovered_with_phases():
    # a near-permutation with sign flips: states reordered, phases reported
    perm, signs = [2, 0, 1, 3], [1, -1, -1, 1]
    o = np.zeros((4, 4))
    for i, (p, s) in enumerate(zip(perm, signs)):
        o[i, p] = 0.97 * s
    o += 0.05 * rotation(4, 1)
    for row in range(4):
        m = match_row(o, row)
        assert m.column == perm[row]
        assert m.phase == signs[row]
        assert row_flags("S1", "S1", "S2", m, **OPTS) == []


def test_hungarian_keeps_roots_distinct_where_argmax_would_not():
    # both previous states overlap most with new root 0; the optimal one-to-one assignment
    # gives root 0 to the stronger claim and root 1 to the other (brute force: 0.9 + 0.6 >
    # 0.8 + 0.3)
    o = np.array([[0.9, 0.3], [0.8, 0.6]])
    assert match_row(o, 0).column == 0
    assert match_row(o, 1).column == 1


def test_flags_lost_ambiguous_window():
    lost = match_row(np.array([[0.4, 0.3, 0.2]]), 0)
    assert any("lost" in f for f in row_flags("S2", "S2", "S1", lost, **OPTS))
    ambiguous = match_row(np.array([[0.68, 0.62, 0.0], [0.0, 0.0, 1.0]]), 0)
    flags = row_flags("S1", "S1", "S1", ambiguous, **OPTS)
    assert any("ambiguous" in f for f in flags)
    assert not any("lost" in f for f in flags)
    leaking = match_row(np.array([[0.85, 0.1, 0.05]]), 0)  # 0.735 of the norm kept
    flags = row_flags("S3", "S3", "S3", leaking, **OPTS)
    assert any("more roots" in f for f in flags)
    assert leaking.window == pytest.approx(0.85**2 + 0.1**2 + 0.05**2)


def test_pair_follows_subspace_through_internal_mixing():
    # the pair (rows 1, 2) rotates by 45 degrees inside itself: individual overlaps are 0.71
    # (ambiguous alone) but the pair subspace is intact: smallest singular value 1
    c = np.cos(np.pi / 4)
    o = np.eye(4)
    o[1:3, 1:3] = [[c, c], [-c, c]]
    pm = match_pair(o, (1, 2))
    assert pm.columns == (1, 2)
    assert pm.confidence == pytest.approx(1.0)
    assert pm.captured == pytest.approx(1.0)


def test_pair_finds_intruder_swap():
    # a third state (row 3) moved between the pair members: pair now on roots 1 and 3
    o = np.zeros((4, 4))
    o[0, 0] = 1.0
    o[1, 1] = -0.98
    o[2, 3] = 0.97
    o[3, 2] = 0.99
    pm = match_pair(o, (1, 2))
    assert pm.columns == (1, 3)
    assert pm.confidence == pytest.approx(np.linalg.svd(o[[1, 2]][:, [1, 3]])[1][-1])
    assert [m.phase for m in pm.matches] == [-1, 1]


def test_errors():
    with pytest.raises(StateTrackingError):
        match_row(np.eye(2), 3)
    with pytest.raises(StateTrackingError):
        match_pair(np.eye(3), (1, 1))
