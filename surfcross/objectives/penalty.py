"""Penalty-function crossing search (Levine, Coe, Martinez, J. Phys. Chem. B 2008, 112, 405).

Minimizes the scalar

    F(R) = Ebar + sigma * G(dE),    G(dE) = dE^2 / (dE + alpha),

with Ebar the mean energy of the pair and dE = E_upper - E_lower >= 0. Its exact gradient is

    grad F = gbar + sigma * G'(dE) * x1,    G'(dE) = dE (dE + 2 alpha) / (dE + alpha)^2.

F is a true objective (``exact_gradient=True``): energy-ratio trust control applies, and no
derivative couplings are needed; it works for same-spin and different-spin pairs, in any
coordinate system. A large sigma makes F stiff in the branching plane: its curvature there
reaches about 2 sigma |x1|^2 / alpha (hundreds of Eh/bohr^2), so the optimizer must allow
such Hessian eigenvalues (see :func:`surfcross.objectives.searches.optimizer_settings_for`).

Known limit: at a fixed sigma the minimum of F is *near* the seam, with a residual gap of
about alpha |gbar.x-hat| / (2 sigma |x1|). The search therefore runs sequentially: after the
inner convergence tests pass, :meth:`PenaltyObjective.after_convergence` checks the gap; if it
exceeds the tolerance, sigma grows (by about 2 dE/gap_tol, between 2 and 10 times) and the
optimizer continues from the same geometry, with the learned curvature along the gap direction
scaled by the growth of sigma (:meth:`PenaltyObjective.adjust_hessian`). sigma is capped at
``sigma_max``; if the gap is still too large there, the search is reported as failed
(:attr:`PenaltyObjective.failed`, :attr:`warnings`). The gap test is deliberately *not* an
inner convergence criterion.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from typing import Any, Mapping, Sequence

import numpy as np

from ..engine.base import Engine
from ..errors import InputError
from ..states import StateLabel
from .base import ObjectiveValue
from .crossing import CrossingObjectiveBase, GAP_TOLERANCES, PairEvaluation

__all__ = ["PenaltySettings", "PenaltyObjective", "smoothed_gap", "smoothed_gap_slope"]

log = logging.getLogger(__name__)


@dataclass(frozen=True, kw_only=True)
class PenaltySettings:
    """Settings of the penalty search.

    Parameters
    ----------
    alpha_eh
        Smoothing parameter alpha (Eh); 0.02 as used with this method.
    sigma
        Initial penalty weight (dimensionless); 3.5 as used with this method.
    sigma_max
        Largest weight tried before the search is reported as failed.
    max_growth
        Largest factor by which sigma grows in one outer cycle (at least 2 is used).
    gap_tol_eh
        Gap accepted as a crossing (1e-3 Eh default, 1e-4 tight).
    project_external
        Remove rigid translations/rotations (None = automatic; off for model engines).
    """

    alpha_eh: float = 0.02
    sigma: float = 3.5
    sigma_max: float = 1000.0
    max_growth: float = 10.0
    gap_tol_eh: float = GAP_TOLERANCES["default"]
    project_external: bool | None = None

    def __post_init__(self) -> None:
        if self.alpha_eh <= 0 or self.sigma <= 0:
            raise InputError("penalty alpha and sigma must be positive")
        if self.sigma_max < self.sigma:
            raise InputError(f"sigma_max ({self.sigma_max}) is below the initial sigma "
                             f"({self.sigma})")
        if self.max_growth < 2.0:
            raise InputError("max_growth must be at least 2")
        if self.gap_tol_eh <= 0:
            raise InputError("the gap tolerance must be positive")


def smoothed_gap(gap: float, alpha: float) -> float:
    """G(dE) = dE^2 / (dE + alpha)."""
    return gap * gap / (gap + alpha)


def smoothed_gap_slope(gap: float, alpha: float) -> float:
    """G'(dE) = dE (dE + 2 alpha) / (dE + alpha)^2."""
    return gap * (gap + 2.0 * alpha) / (gap + alpha) ** 2


class PenaltyObjective(CrossingObjectiveBase):
    """F = Ebar + sigma G(dE) with sequential sigma increase (see the module docstring)."""

    name = "crossing-penalty"
    search = "penalty"

    def __init__(self, engine: Engine, states: Sequence[str | StateLabel],
                 settings: PenaltySettings | None = None, **kwargs: Any) -> None:
        super().__init__(engine, states, settings or PenaltySettings(), **kwargs)
        self.sigma = self.settings.sigma
        self.cycles = 0
        self.failed = False
        self._growth = 1.0  # sigma_new / sigma_old of the last outer cycle (Hessian rescaling)

    @property
    def gap_reached(self) -> bool:
        """True once the last accepted point has a gap within the tolerance."""
        pair = self.accepted_pair
        return pair is not None and pair.gap <= self.settings.gap_tol_eh

    def value_and_gradient(self, pair: PairEvaluation) -> tuple[float, np.ndarray]:
        """F and its exact gradient (flat) for one pair evaluation."""
        alpha = self.settings.alpha_eh
        gap = pair.gap
        value = pair.mean_energy + self.sigma * smoothed_gap(gap, alpha)
        grad = pair.gbar + self.sigma * smoothed_gap_slope(gap, alpha) * pair.x1
        return value, grad

    def _compose(self, pair: PairEvaluation):
        value, grad = self.value_and_gradient(pair)
        g = pair.shape(grad)
        out = ObjectiveValue(
            value=value, gradient=g, exact_gradient=True,
            energies_eh=pair.energies(),
            gap_eh=pair.gap, evaluation=pair.evaluation, tracking=pair.tracking,
            info=self._info(pair, sigma=self.sigma, alpha_eh=self.settings.alpha_eh,
                            cycle=self.cycles))
        return out, None

    def after_convergence(self, value: ObjectiveValue) -> bool:
        """Outer step of the sequential penalty: grow sigma while the gap is too large."""
        gap = float(value.gap_eh)
        tol = self.settings.gap_tol_eh
        if gap <= tol:
            log.info("penalty search: gap %.2e Eh within %.1e at sigma %.4g", gap, tol, self.sigma)
            return False
        if self.sigma >= self.settings.sigma_max:
            self.failed = True
            self.warn(f"penalty search failed: the gap is still {gap:.2e} Eh (tolerance "
                      f"{tol:.1e}) at the largest penalty weight sigma = {self.sigma:.4g}; the "
                      "states may not cross here (avoided crossing) -- check with the in-plane "
                      "probe or use the projected search")
            return False
        # residual gap scales as 1/sigma once dE << alpha: aim below tol with a factor 2 margin
        factor = min(max(2.0 * gap / tol, 2.0), self.settings.max_growth)
        old = self.sigma
        self.sigma = min(self.sigma * factor, self.settings.sigma_max)
        self._growth = self.sigma / old
        self.cycles += 1
        log.info("penalty search: gap %.2e Eh > %.1e, sigma -> %.4g (outer cycle %d)",
                 gap, tol, self.sigma, self.cycles)
        return True

    def adjust_hessian(self, H: np.ndarray, to_q: Any) -> np.ndarray:
        """The Hessian after sigma grew: its curvature along the gap direction scaled with sigma.

        Near the seam the curvature of F along x-hat is about sigma G''(dE) |x1|^2 (mostly the
        penalty term), so the learned curvature c along the q-space image u of x1 becomes
        c sigma_new / sigma_old; the rest of H (the mean energy's curvature) is kept. A reset
        to the model Hessian would forget the stiff direction and reject the next step.
        """
        pair = self.accepted_pair
        factor, self._growth = self._growth, 1.0
        if pair is None or factor == 1.0:
            return H
        v = np.asarray(to_q(pair.shape(pair.x1)), float).ravel()
        n = float(np.linalg.norm(v))
        if n == 0.0:
            return H
        u = v / n
        c = float(u @ H @ u)
        return H + (factor - 1.0) * c * np.outer(u, u)

    def state_dict(self) -> dict[str, Any]:
        state = super().state_dict()
        state.update(sigma=self.sigma, cycles=self.cycles, failed=self.failed)
        return state

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        super().load_state_dict(state)
        self.sigma = float(state.get("sigma", self.sigma))
        self.cycles = int(state.get("cycles", self.cycles))
        self.failed = bool(state.get("failed", self.failed))
