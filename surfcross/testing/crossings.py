"""Model crossings with known answers, for tests and benchmarks of crossing searches.

Each :class:`KnownCrossing` bundles an analytic model engine (:mod:`surfcross.engine.model`),
the pair of states, a start geometry and the closed-form answer: the lowest point of the seam
(MECI / MECP) and its energy, or for the avoided crossing the smallest gap.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from ..engine.model import (ModelEngine, ModelSurface, avoided_model, conical_model,
                            model_geometry, spin_model)
from ..geometry import Geometry

__all__ = ["KnownCrossing", "conical_case", "spin_case", "avoided_case", "crossing_cases",
           "ModelEngine", "ModelSurface", "conical_model", "spin_model", "avoided_model",
           "model_geometry"]


@dataclass(frozen=True, kw_only=True)
class KnownCrossing:
    """A model pair with its exact answer.

    Attributes
    ----------
    kind
        'conical', 'one-dimensional' or 'avoided'.
    crossing_q
        Displacement (bohr, flat) of the seam minimum; for 'avoided', the point of smallest
        gap that also minimizes the mean energy on u.q = a.
    crossing_energy_eh
        Mean energy of the pair there (equal to both energies at a real crossing).
    minimum_gap_eh
        0 for real crossings, 2 c0 for the avoided crossing.
    """

    name: str
    make_engine: Callable[[], ModelEngine]
    states: tuple[str, str]
    kind: str
    start: Geometry
    crossing_q: np.ndarray
    crossing_energy_eh: float
    minimum_gap_eh: float

    @property
    def crossing_geometry(self) -> Geometry:
        return model_geometry(self.crossing_q)


def _case(name: str, factory: Callable[[], ModelEngine], states: tuple[str, str],
          kind: str, gap: float) -> KnownCrossing:
    q, e = factory().surface.seam_minimum()
    return KnownCrossing(name=name, make_engine=factory, states=states, kind=kind,
                         start=model_geometry(np.zeros(6)), crossing_q=q, crossing_energy_eh=e,
                         minimum_gap_eh=gap)


def conical_case() -> KnownCrossing:
    """S1/S2 conical intersection of :func:`conical_model`."""
    return _case("conical", conical_model, ("S1", "S2"), "conical", 0.0)


def spin_case() -> KnownCrossing:
    """S1/T1 one-dimensional crossing of :func:`spin_model`."""
    return _case("spin", spin_model, ("S1", "T1"), "one-dimensional", 0.0)


def avoided_case(coupling_eh: float = 0.01) -> KnownCrossing:
    """S1/S2 avoided crossing of :func:`avoided_model` (smallest gap 2 * coupling)."""
    return _case("avoided", lambda: avoided_model(coupling_eh), ("S1", "S2"), "avoided",
                 2.0 * coupling_eh)


def crossing_cases() -> tuple[KnownCrossing, ...]:
    """All model cases."""
    return conical_case(), spin_case(), avoided_case()
