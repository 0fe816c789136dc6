"""Gradient-projection crossing search for same-spin pairs (conical intersections).

Working gradient (Bearpark, Robb, Schlegel, Chem. Phys. Lett. 1994, 223, 269, with the gap
term scaled so that the Newton step toward the seam is the linear extrapolation -dE/|x1|):

    G = 2 dE x-hat + P gbar,    P = 1 - x-hat x-hat^T - y-hat y-hat^T,

with x-hat = x1/|x1| and y-hat the second branching-plane direction, taken

* from the interstate coupling vector h when the engine computes it ('coupling'), or
* from the branching-plane update of Maeda, Ohno, Morokuma (J. Chem. Theory Comput. 2010, 6,
  1538) when it does not ('updated'): y_0 = gbar orthogonalized to x-hat_0, then

      y_k ~ (y_{k-1}.x_k) x_{k-1} - (x_{k-1}.x_k) y_{k-1}    (normalized),

  the smallest rotation of the previous plane that contains the new x-hat. The new plane is
  computed at every trial geometry but committed only when the optimizer accepts the step.

The optimizer is given the step model ``SubspaceModel([x-hat, y-hat], [2|x1|, c_y])``
(curvature 2|x1| along x-hat makes the step -dE/|x1|; c_y a modest model value, since G has
no y-hat component). Convergence: max/rms of P gbar (the force criteria) and gap <= gap_tol.
Step acceptance uses the merit Ebar + mu dE (see :func:`~.crossing.merit_weight`): G is not
the gradient of any scalar.

Limits: y-hat from the update is a direction only (no magnitude of h). Only for pairs that can
form a conical intersection; use the spin search for states of different spin or symmetry.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from ..engine.base import Engine
from ..errors import InputError
from ..states import StateLabel
from .crossing import (GAP_TOLERANCES, CrossingObjectiveBase, PairEvaluation,
                       MeritWeighted, remove_external, unit)

__all__ = ["ProjectedSettings", "ProjectedObjective", "update_plane_vector", "initial_plane_vector"]

PLANES = ("auto", "coupling", "updated")


@dataclass(frozen=True, kw_only=True)
class ProjectedSettings:
    """Settings of the projected (composed-gradient) search.

    Parameters
    ----------
    plane
        Source of the second branching-plane direction: 'coupling' (h from the engine),
        'updated' (plane update, no couplings needed) or 'auto' (coupling when available).
    gap_tol_eh
        Gap accepted as degenerate (1e-3 Eh default, 1e-4 tight).
    plane_curvature
        Model curvature along y-hat, Eh/bohr^2.
    merit_gap_weight
        mu in the acceptance merit Ebar + mu dE; None = automatic (see ``merit_weight``).
    project_external
        Remove rigid translations/rotations (None = automatic; off for model engines).
    """

    plane: str = "auto"
    gap_tol_eh: float = GAP_TOLERANCES["default"]
    plane_curvature: float = 0.1
    merit_gap_weight: float | None = None
    project_external: bool | None = None

    def __post_init__(self) -> None:
        if self.plane not in PLANES:
            raise InputError(f"unknown branching-plane source {self.plane!r}: choose "
                             f"{', '.join(PLANES)}")
        if self.gap_tol_eh <= 0 or self.plane_curvature <= 0:
            raise InputError("gap tolerance and plane curvature must be positive")


def initial_plane_vector(xhat: np.ndarray, gbar: np.ndarray,
                         external: np.ndarray | None = None) -> np.ndarray:
    """y_0: gbar orthogonalized to x-hat (and rigid-body modes), normalized.

    When gbar is parallel to x-hat, any direction orthogonal to x-hat (the unit vector along the
    smallest x-hat component, orthogonalized) is used.
    """
    y = remove_external(gbar - (gbar @ xhat) * xhat, external)
    y, n = unit(y)
    if n > 1e-10:
        return y
    e = np.zeros_like(xhat)
    e[int(np.argmin(np.abs(xhat)))] = 1.0
    e = remove_external(e - (e @ xhat) * xhat, external)
    return unit(e)[0]


def update_plane_vector(x_prev: np.ndarray, y_prev: np.ndarray, xhat: np.ndarray,
                        external: np.ndarray | None = None, tiny: float = 1e-8) -> np.ndarray:
    """Branching-plane update: y_k from (x_{k-1}, y_{k-1}) and the new x-hat (unit vectors).

    y_k is orthogonal to x_k, lies in span{x_{k-1}, y_{k-1}}, and its sign is aligned with
    y_{k-1}. Fallback when x-hat did not move (numerator ~0): y_{k-1} re-orthogonalized.
    """
    num = (y_prev @ xhat) * x_prev - (x_prev @ xhat) * y_prev
    y, n = unit(remove_external(num, external))
    if n < tiny:
        y, n = unit(remove_external(y_prev - (y_prev @ xhat) * xhat, external))
        if n < tiny:
            return initial_plane_vector(xhat, y_prev, external)
    y = y - (y @ xhat) * xhat  # guard against round-off
    y = unit(y)[0]
    return -y if y @ y_prev < 0 else y


class ProjectedObjective(MeritWeighted, CrossingObjectiveBase):
    """Composed gradient 2 dE x-hat + P gbar (see the module docstring)."""

    name = "crossing-projected"
    search = "projected"

    def __init__(self, engine: Engine, states: Sequence[str | StateLabel],
                 settings: ProjectedSettings | None = None, **kwargs: Any) -> None:
        settings = settings or ProjectedSettings()
        plane = settings.plane
        if plane == "auto":
            plane = "coupling" if engine.has_couplings else "updated"
        if plane == "coupling" and not engine.has_couplings:
            raise InputError("this method gives no derivative couplings: use the projected "
                             "search with the updated plane (plane='updated') or the penalty "
                             "search")
        super().__init__(engine, states, settings, want_coupling=(plane == "coupling"), **kwargs)
        self.plane = plane
        if not self.pairs.same_manifold:
            self.warn(f"the projected search assumes a conical intersection, but "
                      f"{self.targets[0]} and {self.targets[1]} belong to different spin "
                      "manifolds (a one-dimensional crossing): use the spin search")
        self.x_prev: np.ndarray | None = None
        self.y_prev: np.ndarray | None = None
        self.mu: float | None = settings.merit_gap_weight

    def plane_vectors(self, pair: PairEvaluation) -> tuple[np.ndarray, np.ndarray, float, str]:
        """(x-hat, y-hat, |x1|, source of y-hat) at this pair evaluation."""
        xhat, n1 = unit(pair.x1)
        if n1 < 1e-12:
            if self.x_prev is None:
                raise InputError("the two states have identical gradients at the start: "
                                 "displace the geometry slightly and retry")
            xhat = self.x_prev
        source = self.plane
        if self.plane == "coupling" and pair.h is not None:
            y, n = unit(pair.h - (pair.h @ xhat) * xhat)
            if n > 1e-10:
                if self.y_prev is not None and y @ self.y_prev < 0:
                    y = -y
                return xhat, y, n1, "coupling"
            source = "updated (h parallel to x1)"
        if self.x_prev is None or self.y_prev is None:
            y = initial_plane_vector(xhat, pair.gbar, pair.external)
        else:
            y = update_plane_vector(self.x_prev, self.y_prev, xhat, pair.external)
        return xhat, y, n1, source

    def _compose(self, pair: PairEvaluation):
        xhat, yhat, n1, source = self.plane_vectors(pair)
        gbar = pair.gbar
        projected = gbar - (gbar @ xhat) * xhat - (gbar @ yhat) * yhat
        working = 2.0 * pair.gap * xhat + projected
        value = self.composed_value(pair, working, projected, [xhat, yhat],
                                    [2.0 * n1, self.settings.plane_curvature], self.merit_for(pair),
                                    plane=source)
        return value, (xhat, yhat)

    def _commit(self, pair: PairEvaluation, payload: Any) -> None:
        self.x_prev, self.y_prev = payload
        self.update_merit(pair)

    def state_dict(self) -> dict[str, Any]:
        state = super().state_dict()
        state.update(plane=self.plane, **self.merit_state(),
                     x_prev=None if self.x_prev is None else self.x_prev.tolist(),
                     y_prev=None if self.y_prev is None else self.y_prev.tolist())
        return state

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        super().load_state_dict(state)
        self.load_merit_state(state)
        for key in ("x_prev", "y_prev"):
            if state.get(key) is not None:
                setattr(self, key, np.asarray(state[key], float))
