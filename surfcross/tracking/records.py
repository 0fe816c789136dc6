"""What the state tracker reports at each geometry."""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Mapping

import numpy as np

__all__ = ["TrackingRecord"]


@dataclass(frozen=True)
class TrackingRecord:
    """Assignment of followed states to the roots computed at one geometry.

    Attributes
    ----------
    targets
        Task labels of the followed states ('S1', or 'S1', 'S2' for a pair), as at the start.
    roots
        Adiabatic labels that carry them at this geometry (for a pair: lower, upper by energy).
    previous_roots
        The adiabatic labels at the previous accepted geometry.
    overlaps
        Overlap matrices per manifold between the previous accepted geometry (rows) and this
        one (columns).
    confidence
        |overlap| of each assignment (pair tracking: the smallest singular value of the
        2 x n block projected on the chosen two roots).
    flags
        Human-readable warnings (low confidence, ambiguous match, state left the root window).
    """

    targets: tuple[str, ...]
    roots: tuple[str, ...]
    previous_roots: tuple[str, ...] = ()
    overlaps: Mapping[str, np.ndarray] = field(default_factory=dict)
    confidence: tuple[float, ...] = ()
    flags: tuple[str, ...] = ()
    phases: tuple[int, ...] = ()
    info: Mapping[str, Any] = field(default_factory=dict)

    @property
    def reordered(self) -> bool:
        """True when some followed state changed its adiabatic index at this step."""
        return bool(self.previous_roots) and tuple(self.previous_roots) != tuple(self.roots)
