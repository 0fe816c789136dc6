"""Crossing search for states that do not couple: different spin (or spatial symmetry).

Such states cross along a seam of dimension N_int - 1: the branching space is the single
direction x-hat = x1/|x1|. Effective gradient of Harvey, Aschi, Schwarz, Koch (Theor. Chem.
Acc. 1998, 99, 95), in our scaling:

    G = dE x-hat + P gbar,    P = 1 - x-hat x-hat^T,

with step model ``SubspaceModel([x-hat], [|x1|])``, so the Newton step along x-hat is
-dE/|x1|, the linear extrapolation to the crossing (the original work scales the difference
term by a constant factor instead). At convergence dE = 0 and P gbar = 0, i.e. both gradients
are parallel to x1. Convergence: force criteria on P gbar and gap <= gap_tol; steps are
accepted on the merit Ebar + mu dE.

``symmetry`` (the pair's point-group record from ``tasks.crossing.pair_symmetry``) tells a
same-spin pair that no nuclear motion can couple, for which this is the right search.

Limits: the point found is a geometric landmark; how fast a molecule actually changes spin
there depends on the spin-orbit coupling, which this search does not compute. For a
same-spin pair this search ignores the second branching direction and can stall near a
conical intersection: use the projected search there.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from ..engine.base import Engine
from ..errors import InputError
from ..states import StateLabel
from .crossing import (GAP_TOLERANCES, CrossingObjectiveBase, PairEvaluation,
                       MeritWeighted, unit)

__all__ = ["SpinSettings", "SpinCrossingObjective"]


@dataclass(frozen=True, kw_only=True)
class SpinSettings:
    """Settings of the spin-crossing search.

    Parameters
    ----------
    gap_tol_eh
        Gap accepted as a crossing (1e-3 Eh default, 1e-4 tight).
    merit_gap_weight
        mu in the acceptance merit Ebar + mu dE; None = automatic.
    project_external
        Remove rigid translations/rotations (None = automatic; off for model engines).
    """

    gap_tol_eh: float = GAP_TOLERANCES["default"]
    merit_gap_weight: float | None = None
    project_external: bool | None = None

    def __post_init__(self) -> None:
        if self.gap_tol_eh <= 0:
            raise InputError("the gap tolerance must be positive")


class SpinCrossingObjective(MeritWeighted, CrossingObjectiveBase):
    """Effective gradient dE x-hat + (1 - x-hat x-hat^T) gbar (see the module docstring)."""

    name = "crossing-spin"
    search = "spin"

    def __init__(self, engine: Engine, states: Sequence[str | StateLabel],
                 settings: SpinSettings | None = None, *, symmetry: Any = None,
                 **kwargs: Any) -> None:
        settings = settings or SpinSettings()
        super().__init__(engine, states, settings, want_coupling=False, **kwargs)
        reference_pair = any(t.is_reference for t in self.targets) and \
            getattr(getattr(engine, "spec", None), "method", "casscf") != "casscf"
        blocked = symmetry is not None and symmetry.get("can_mix") is False
        if self.pairs.same_manifold and not reference_pair and not blocked:
            # (a response method's reference and a response state do not couple: for them
            # the one-dimensional search is the right one, see searches.choose_search)
            self.warn(f"{self.targets[0]} and {self.targets[1]} have the same spin: the spin "
                      "search treats their crossing as one-dimensional and ignores the "
                      "coupling direction; unless their spatial symmetries differ, use the "
                      "projected search")
        self.mu: float | None = settings.merit_gap_weight
        self.x_prev: np.ndarray | None = None

    def _compose(self, pair: PairEvaluation):
        xhat, n1 = unit(pair.x1)
        if n1 < 1e-12:
            if self.x_prev is None:
                raise InputError("the two states have identical gradients at the start: "
                                 "displace the geometry slightly and retry")
            xhat = self.x_prev
        gbar = pair.gbar
        projected = gbar - (gbar @ xhat) * xhat
        working = pair.gap * xhat + projected
        value = self.composed_value(pair, working, projected, [xhat], [n1],
                                     self.merit_for(pair))
        return value, xhat

    def _commit(self, pair: PairEvaluation, payload: Any) -> None:
        self.x_prev = payload
        self.update_merit(pair)

    def state_dict(self) -> dict[str, Any]:
        state = super().state_dict()
        state.update(self.merit_state())
        return state

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        super().load_state_dict(state)
        self.load_merit_state(state)
