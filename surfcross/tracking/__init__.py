"""State tracking by wavefunction overlap between geometries.

* :mod:`.overlap` -- exact CIS/TDA overlap formulas (pure numpy);
* :mod:`.assign` -- optimal matching, phases and confidence checks;
* :mod:`.tracker` -- :class:`StateTracker`, which follows the states of a task;
* :mod:`.records` -- :class:`TrackingRecord`, what the tracker reports at each geometry.
"""

from .assign import Match, PairMatch, assign_columns, match_pair, match_row
from .overlap import first_order_overlaps, manifold_overlaps, mo_overlap
from .records import TrackingRecord
from .tracker import StateTracker, TrackingOptions

__all__ = ["Match", "PairMatch", "assign_columns", "match_pair", "match_row",
           "first_order_overlaps", "manifold_overlaps", "mo_overlap", "TrackingRecord",
           "StateTracker", "TrackingOptions"]
