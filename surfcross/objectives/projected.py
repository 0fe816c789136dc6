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
no y-hat component). Step acceptance uses the merit Ebar + mu dE (see
:func:`~.crossing.merit_weight`): G is not the gradient of any scalar.

Convergence is verified, never assumed from an unverified plane:

* Until the branching plane is *established* -- the engine gives the coupling vector h, or
  x-hat has turned by more than ``ROTATION_MIN`` (sine of the angle) between accepted points,
  which is what the state mixing near a conical intersection does -- there is no y-hat: the
  working gradient is 2 dE x-hat + (1 - x-hat x-hat^T) gbar and the force test is on
  (1 - x-hat x-hat^T) gbar. (The first y of the update, the mean gradient orthogonalized to
  x-hat, makes P gbar vanish at the start point by construction; testing that P would call
  any start on the seam converged.) A point that passes this test is stationary on the seam
  whatever its dimension.
* With an updated (not coupling) plane, every point that passes the force and gap tests gets
  an independent check of y-hat (:func:`~surfcross.analysis.probe.second_direction_check`):
  central differences of grad(dE^2) = 2 dE x1 along y-hat give (Hessian of dE^2) y-hat =
  8 h (h.y-hat) at an intersection, i.e. the true second branching direction whenever y-hat
  has any part of it. If the projected gradient is still below the force thresholds with that
  direction, the point is converged (``verification`` says so, with the residual seam
  gradient); if not, the search continues with the corrected plane; if there is no coupling
  along y-hat (|h.y-hat| < ``COUPLING_MIN`` |x1|/2), the pair behaves as a one-dimensional
  crossing here and the search switches to the one-dimensional test and continues.

Limits: y-hat from the update is a direction only (no magnitude of h). Only for pairs that can
form a conical intersection; use the spin search for states of different spin or symmetry.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from ..engine.base import Engine
from ..errors import InputError
from ..states import StateLabel
from .crossing import (GAP_TOLERANCES, CrossingObjectiveBase, PairEvaluation,
                       MeritWeighted, remove_external, unit)

__all__ = ["ProjectedSettings", "ProjectedObjective", "update_plane_vector", "initial_plane_vector",
           "ROTATION_MIN", "COUPLING_MIN"]

log = logging.getLogger(__name__)

PLANES = ("auto", "coupling", "updated")
#: sine of the turn of x-hat between accepted points that establishes the branching plane
#: (our choice: far above the noise of analytic gradients, ~1e-5, and reached within a few
#: steps near any conical intersection, where x-hat turns with the state mixing)
ROTATION_MIN = 0.05
#: |h.y-hat| / (|x1|/2) below which y-hat carries no coupling (the probe's flat ratio)
COUPLING_MIN = 0.05
#: finite-difference displacement (bohr) of the check of y-hat
CHECK_STEP_BOHR = 0.005
#: corrections of y-hat by the check before the search gives the plane up as one-dimensional
MAX_CORRECTIONS = 4


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
    """Composed gradient 2 dE x-hat + P gbar with a verified plane (see the module docstring).

    Attributes
    ----------
    mode
        'projected' (two-dimensional branching plane) or 'one-dimensional' (after the check
        found no coupling along the plane; from then on P = 1 - x-hat x-hat^T).
    verification
        After convergence: how the point was verified (dict for result.json), else None.
    """

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
        self.mode = "projected"
        self.verification: dict[str, Any] | None = None
        self.corrections = 0
        self.max_turn = 0.0  # largest sine of the turn of x-hat between accepted points
        self._convergence: Any = None
        self._extra_evaluations = 0
        self._checked: tuple[np.ndarray, np.ndarray] | None = None  # (coords, y) last checked
        self._last_check: dict[str, Any] | None = None
        self._learned: np.ndarray | None = None
        self.switched: str | None = None

    # ------------------------------------------------------------------ optimizer hooks
    def use_convergence(self, convergence: Any) -> None:
        """The optimizer's thresholds (the check of y-hat tests the corrected plane with them)."""
        self._convergence = convergence

    def refresh(self, value: Any) -> Any:
        """After a rejected trial: the current point's value with the plane that trial showed.

        A trial whose x-hat turned establishes the plane even when its merit rose; without
        this the next step from the current point would again run along the (unknown) second
        branching direction. Returns None when nothing changed."""
        pair, learned = self.accepted_pair, self._learned
        self._learned = None
        if (learned is None or pair is None or self.y_prev is not None or self.x_prev is None
                or self.mode != "projected" or value.evaluation is not pair.evaluation):
            return None
        self.y_prev = learned
        new, _ = self._compose(pair)
        return new

    def consume_evaluations(self) -> int:
        n, self._extra_evaluations = self._extra_evaluations, 0
        return n

    # ------------------------------------------------------------------ the plane
    def plane_vectors(self, pair: PairEvaluation) -> tuple[np.ndarray, np.ndarray | None, float, str]:
        """(x-hat, y-hat or None, |x1|, source of y-hat) at this pair evaluation.

        y-hat is None while the plane is not established (see the module docstring) and in
        the one-dimensional mode.
        """
        xhat, n1 = unit(pair.x1)
        if n1 < 1e-12:
            if self.x_prev is None:
                raise InputError("the two states have identical gradients at the start: "
                                 "displace the geometry slightly and retry")
            xhat = self.x_prev
        if self.mode == "one-dimensional":
            return xhat, None, n1, "none (one-dimensional)"
        if self.plane == "coupling" and pair.h is not None:
            y, n = unit(pair.h - (pair.h @ xhat) * xhat)
            if n > 1e-10:
                if self.y_prev is not None and y @ self.y_prev < 0:
                    y = -y
                return xhat, y, n1, "coupling"
        if self.y_prev is not None and self.x_prev is not None:
            return xhat, update_plane_vector(self.x_prev, self.y_prev, xhat, pair.external), \
                n1, "updated"
        if self.x_prev is not None and _turn(self.x_prev, xhat) >= ROTATION_MIN:
            # x-hat turned: the previous and the new gap direction span the plane; remember
            # it for the accepted point too, in case this trial is rejected (see refresh)
            y = unit(remove_external(self.x_prev - (self.x_prev @ xhat) * xhat, pair.external))[0]
            self._learned = unit(remove_external(xhat - (xhat @ self.x_prev) * self.x_prev,
                                                 pair.external))[0]
            return xhat, y, n1, "updated"
        return xhat, None, n1, "not established"

    def _compose(self, pair: PairEvaluation):
        xhat, yhat, n1, source = self.plane_vectors(pair)
        gbar = pair.gbar
        projected = gbar - (gbar @ xhat) * xhat
        directions, curvatures = [xhat], [2.0 * n1]
        if yhat is not None:
            projected = projected - (gbar @ yhat) * yhat
            directions.append(yhat)
            curvatures.append(self.settings.plane_curvature)
        working = 2.0 * pair.gap * xhat + projected
        value = self.composed_value(pair, working, projected, directions, curvatures,
                                    self.merit_for(pair), plane=source, mode=self.mode)
        return value, (xhat, yhat)

    def _commit(self, pair: PairEvaluation, payload: Any) -> None:
        xhat, yhat = payload
        self._learned = None
        if self.x_prev is not None:
            self.max_turn = max(self.max_turn, _turn(self.x_prev, xhat))
        self.x_prev, self.y_prev = xhat, yhat
        self.update_merit(pair)

    # ------------------------------------------------------------------ verification
    def after_convergence(self, value: Any) -> bool:
        """Verify the plane of a point that passed every test (see the module docstring).

        Returns True (the optimizer continues from here) when the check corrected y-hat
        and the corrected projected gradient fails the force test, or when it found no
        coupling along y-hat (switch to the one-dimensional test)."""
        pair = self.accepted_pair
        if pair is None:
            return False
        xhat, yhat = self.x_prev, self.y_prev
        residual = np.asarray(value.test_gradient, float).ravel()
        if yhat is None:
            self._verified(pair, residual, "one-dimensional test: (1 - x-hat x-hat^T) gbar, "
                           "which rests on no second branching direction",
                           check=self._hidden_coupling(pair, xhat))
            return False
        source = value.info.get("plane", "")
        if source == "coupling":
            self._verified(pair, residual, "branching plane from the coupling vector h of the "
                           "engine")
            return False
        x = np.asarray(pair.geometry.coords_bohr, float)
        if self._checked is not None and np.array_equal(self._checked[0], x) and \
                abs(float(self._checked[1] @ yhat)) > 1.0 - 1e-12:
            self._verified(pair, residual, "second branching direction confirmed by central "
                           "differences of grad(dE^2) along y-hat", check=self._last_check)
            return False
        from ..analysis.probe import second_direction_check

        check = second_direction_check(self.pairs.engine, pair.evaluation,
                                       (pair.lower, pair.upper), yhat, xhat=xhat,
                                       step_bohr=CHECK_STEP_BOHR, external=pair.external)
        self._extra_evaluations += check.evaluations
        ratio = check.coupling_along / max(0.5 * float(np.linalg.norm(pair.x1)), 1e-30)
        self._last_check = {"coupling_along_y_eh_bohr": check.coupling_along,
                            "coupling_ratio": ratio, "evaluations": check.evaluations,
                            "step_bohr": CHECK_STEP_BOHR}
        if ratio < COUPLING_MIN or self.corrections >= MAX_CORRECTIONS:
            why = (f"no coupling along the plane direction (|h.y|/|g| = {ratio:.3f})"
                   if ratio < COUPLING_MIN else
                   f"the plane direction did not settle after {self.corrections} corrections")
            self._switch(why)
            return True
        gbar = pair.gbar
        y_new = unit(remove_external(check.direction - (check.direction @ xhat) * xhat,
                                     pair.external))[0]
        if y_new @ yhat < 0:
            y_new = -y_new
        corrected = gbar - (gbar @ xhat) * xhat - (gbar @ y_new) * y_new
        self.y_prev = y_new
        self._checked = (x.copy(), y_new.copy())
        if self._passes(corrected):
            self._verified(pair, corrected, "second branching direction confirmed by central "
                           "differences of grad(dE^2) along y-hat", check=self._last_check)
            return False
        self.corrections += 1
        log.info("projected search: the check of the branching plane turned y-hat by %.1f deg; "
                 "continuing with the corrected plane", np.degrees(np.arccos(min(1.0, abs(y_new @ yhat)))))
        return True

    def _hidden_coupling(self, pair: PairEvaluation, xhat: np.ndarray) -> dict[str, Any] | None:
        """At a point that passed the one-dimensional test: look for a second branching
        direction along two fixed pseudo-random directions orthogonal to x-hat (a coupling
        h shows in a random direction with about |h|/sqrt(3N) of its size). The point is
        stationary either way (gbar is along x-hat); this says whether it is conical."""
        if not self.pairs.same_manifold:
            return None
        from ..analysis.probe import second_direction_check

        rng = np.random.default_rng(2010)
        best = 0.0
        for _ in range(2):
            y = remove_external(rng.standard_normal(xhat.size), pair.external)
            y = unit(y - (y @ xhat) * xhat)[0]
            check = second_direction_check(self.pairs.engine, pair.evaluation,
                                           (pair.lower, pair.upper), y, xhat=xhat,
                                           step_bohr=CHECK_STEP_BOHR, external=pair.external)
            self._extra_evaluations += check.evaluations
            best = max(best, check.coupling_along / max(0.5 * float(np.linalg.norm(pair.x1)),
                                                        1e-30))
        return {"directions_tested": 2, "largest_coupling_ratio": best,
                "coupling_found": bool(best >= COUPLING_MIN), "evaluations": 4,
                "step_bohr": CHECK_STEP_BOHR}

    def _passes(self, vector: np.ndarray) -> bool:
        conv = self._convergence
        if conv is None:
            return False
        v = np.asarray(vector, float).ravel()
        ok = True
        if conv.max_force is not None:
            ok &= float(np.abs(v).max()) <= conv.max_force
        if conv.rms_force is not None:
            ok &= float(np.sqrt(np.mean(v * v))) <= conv.rms_force
        return bool(ok)

    def _switch(self, why: str) -> None:
        self.mode = "one-dimensional"
        self.y_prev = None
        text = (f"the projected search found {why} at a point that passed its tests: the pair "
                "behaves as a one-dimensional crossing there (states that do not couple, e.g. "
                "of different symmetry); it continued with the one-dimensional test "
                "(1 - x-hat x-hat^T) gbar")
        log.info(text)
        self.switched = why

    def _verified(self, pair: PairEvaluation, residual: np.ndarray, how: str,
                  check: dict | None = None) -> None:
        r = np.asarray(residual, float).ravel()
        one = pair.gbar - (pair.gbar @ unit(pair.x1)[0]) * unit(pair.x1)[0]
        self.verification = {
            "verified": True, "mode": self.mode, "how": how,
            "residual_seam_gradient_max_eh_bohr": float(np.abs(r).max()),
            "residual_seam_gradient_rms_eh_bohr": float(np.sqrt(np.mean(r * r))),
            "one_dimensional_residual_max_eh_bohr": float(np.abs(one).max()),
            "largest_turn_of_x_hat": float(self.max_turn),
            "plane_corrections": int(self.corrections),
            "switched_to_one_dimensional": self.switched,
            "check": check}

    # ------------------------------------------------------------------ resume
    def state_dict(self) -> dict[str, Any]:
        state = super().state_dict()
        state.update(plane=self.plane, **self.merit_state(), mode=self.mode,
                     corrections=self.corrections, max_turn=self.max_turn,
                     x_prev=None if self.x_prev is None else self.x_prev.tolist(),
                     y_prev=None if self.y_prev is None else self.y_prev.tolist())
        return state

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        super().load_state_dict(state)
        self.load_merit_state(state)
        self.mode = str(state.get("mode", self.mode))
        self.corrections = int(state.get("corrections", self.corrections))
        self.max_turn = float(state.get("max_turn", self.max_turn))
        for key in ("x_prev", "y_prev"):
            if state.get(key) is not None:
                setattr(self, key, np.asarray(state[key], float))


def _turn(a: np.ndarray, b: np.ndarray) -> float:
    """Sine of the angle between two unit vectors, blind to their signs."""
    c = min(1.0, abs(float(a @ b)))
    return float(np.sqrt(max(0.0, 1.0 - c * c)))
