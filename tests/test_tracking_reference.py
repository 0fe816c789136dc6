"""The reference state (S0) is the SCF determinant: the tracker never hands it to a response root.

Fact of linear-response theory (common practice): excited roots are built on the reference
determinant, so the reference cannot move to an excited root; a reference that looks like an
excited root signals a change of the SCF solution, which is flagged instead.
"""

import numpy as np

from surfcross.engine.base import Evaluation, StateInfo
from surfcross.geometry import Geometry
from surfcross.states import StateLabel
from surfcross.tracking import StateTracker, TrackingOptions


class _ScriptedEngine:
    """Returns a fixed overlap matrix between any two evaluations (S manifold only)."""

    def __init__(self, matrix):
        self.matrix = np.asarray(matrix, float)

    def overlaps(self, bra, ket):
        return {"S": self.matrix}


def _evaluation(x):
    geom = Geometry.from_angstrom(["H", "H"], [[0, 0, 0], [0, 0, 0.74 + x]])
    states = tuple(StateInfo(StateLabel("S", i), -1.0 + 0.1 * i) for i in range(3))
    return Evaluation(geometry=geom, states=states)


def test_reference_is_kept_and_flagged():
    swap = [[0.30, 0.95, 0.0], [0.95, 0.30, 0.0], [0.0, 0.0, 1.0]]
    tracker = StateTracker(_ScriptedEngine(swap), [StateLabel("S", 0)], options=TrackingOptions())
    tracker.start(_evaluation(0.0))
    record = tracker.assign(_evaluation(0.01))
    assert record.roots == ("S0",)
    assert any("reference" in f for f in record.flags)


def test_excited_state_still_follows_its_character():
    swap = [[1.0, 0.0, 0.0], [0.0, 0.1, 0.99], [0.0, 0.99, 0.1]]
    tracker = StateTracker(_ScriptedEngine(swap), [StateLabel("S", 1)], options=TrackingOptions())
    tracker.start(_evaluation(0.0))
    assert tracker.assign(_evaluation(0.01)).roots == ("S2",)
