"""Quasi-Newton Hessian updates as strategy objects, with an explicit curvature policy.

Every update satisfies the secant condition H_new s = y (for the y it actually uses). With
s = q_new - q_old and y = g_new - g_old:

* BFGS: H + y y^T / (y.s) - H s s^T H / (s.H.s); keeps H positive definite iff y.s > 0.
* SR1: H + r r^T / (r.s), r = y - H s; skipped when |r.s| < 1e-8 |r||s| (Nocedal & Wright,
  Numerical Optimization, sec. 6.2; recalled from memory).
* PSB (Powell-symmetric-Broyden): H + (r s^T + s r^T)/(s.s) - (r.s) s s^T/(s.s)^2.
* Bofill: phi SR1 + (1 - phi) PSB with phi = (r.s)^2 / ((r.r)(s.s)) (Bofill 1994, recalled
  from memory).

Curvature policy (what happens when the step fails the curvature condition):

* 'damp': Powell's damping, y -> theta y + (1 - theta) H s with theta = 1 if
  s.y >= 0.2 s.H.s, else theta = 0.8 s.H.s / (s.H.s - s.y); the update then proceeds with the
  damped y (this keeps a BFGS update positive definite).
* 'skip': when s.y <= 1e-8 |s||y| the Hessian is left unchanged.

The optimizer clamps the eigenvalues of the result to a safe positive range afterwards
(:func:`clamp_eigenvalues`), as minimizations need.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Mapping

import numpy as np

from ..errors import InputError
from .settings import CURVATURE_POLICIES

__all__ = ["HessianUpdate", "BFGSUpdate", "SR1Update", "PSBUpdate", "BofillUpdate",
           "make_update", "powell_damped", "clamp_eigenvalues", "UpdateOutcome"]

#: relative curvature below which a step is considered to have failed the curvature condition
CURVATURE_EPS = 1e-8
#: relative size below which an SR1/Bofill denominator is considered unsafe
SR1_EPS = 1e-8


@dataclass(frozen=True, kw_only=True)
class UpdateOutcome:
    """What an update did: 'updated', 'damped' or 'skipped'."""

    hessian: np.ndarray
    action: str


def powell_damped(hessian: np.ndarray, s: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, bool]:
    """Powell's damped y; returns (y_used, damped?)."""
    sHs = float(s @ hessian @ s)
    sy = float(s @ y)
    if sHs <= 0 or sy >= 0.2 * sHs:
        return y, False
    theta = 0.8 * sHs / (sHs - sy)
    return theta * y + (1.0 - theta) * (hessian @ s), True


def clamp_eigenvalues(hessian: np.ndarray, lo: float, hi: float) -> np.ndarray:
    """Symmetric matrix with its eigenvalues clipped into [lo, hi]."""
    H = 0.5 * (hessian + hessian.T)
    w, v = np.linalg.eigh(H)
    wc = np.clip(w, lo, hi)
    if np.array_equal(w, wc):
        return H
    return (v * wc) @ v.T


class HessianUpdate:
    """Base class: holds the curvature policy and counts what it did (resumable)."""

    name = "base"

    def __init__(self, curvature_policy: str = "damp") -> None:
        if curvature_policy not in CURVATURE_POLICIES:
            raise InputError(f"unknown curvature policy {curvature_policy!r}: valid choices are "
                             f"{', '.join(CURVATURE_POLICIES)}")
        self.curvature_policy = curvature_policy
        self.counts = {"updated": 0, "damped": 0, "skipped": 0}

    # -- subclasses implement the formula
    def _formula(self, H: np.ndarray, s: np.ndarray, y: np.ndarray) -> np.ndarray | None:
        raise NotImplementedError

    def update(self, hessian: np.ndarray, step: np.ndarray, grad_change: np.ndarray) -> UpdateOutcome:
        """New Hessian from the step s and gradient change y (a new array; input untouched)."""
        H = np.asarray(hessian, float)
        s = np.asarray(step, float).ravel()
        y = np.asarray(grad_change, float).ravel()
        ns, ny = np.linalg.norm(s), np.linalg.norm(y)
        if ns == 0.0:
            return self._record(H.copy(), "skipped")
        action = "updated"
        if self.curvature_policy == "skip":
            if s @ y <= CURVATURE_EPS * ns * ny:
                return self._record(H.copy(), "skipped")
        else:
            y, damped = powell_damped(H, s, y)
            action = "damped" if damped else action
        new = self._formula(H, s, y)
        if new is None or not np.all(np.isfinite(new)):
            return self._record(H.copy(), "skipped")
        return self._record(0.5 * (new + new.T), action)

    def _record(self, H: np.ndarray, action: str) -> UpdateOutcome:
        self.counts[action] += 1
        return UpdateOutcome(hessian=H, action=action)

    def state_dict(self) -> dict[str, Any]:
        return {"name": self.name, "curvature_policy": self.curvature_policy,
                "counts": dict(self.counts)}

    def load_state_dict(self, state: Mapping[str, Any]) -> None:
        if state.get("name", self.name) != self.name:
            raise InputError(f"saved Hessian update {state.get('name')!r} does not match {self.name!r}")
        self.counts = {k: int(v) for k, v in dict(state.get("counts", self.counts)).items()}


class BFGSUpdate(HessianUpdate):
    """BFGS update (positive definite while y.s > 0)."""

    name = "bfgs"

    def _formula(self, H, s, y):
        sy = float(s @ y)
        Hs = H @ s
        sHs = float(s @ Hs)
        if sy <= CURVATURE_EPS * np.linalg.norm(s) * np.linalg.norm(y) or sHs <= 0:
            return None
        return H + np.outer(y, y) / sy - np.outer(Hs, Hs) / sHs


class SR1Update(HessianUpdate):
    """Symmetric rank-one update with the usual skip rule."""

    name = "sr1"

    def _formula(self, H, s, y):
        r = y - H @ s
        rs = float(r @ s)
        if abs(rs) < SR1_EPS * np.linalg.norm(r) * np.linalg.norm(s) or rs == 0.0:
            return None
        return H + np.outer(r, r) / rs


def _psb(H, s, y):
    r = y - H @ s
    ss = float(s @ s)
    return H + (np.outer(r, s) + np.outer(s, r)) / ss - float(r @ s) * np.outer(s, s) / ss**2


class PSBUpdate(HessianUpdate):
    """Powell-symmetric-Broyden update."""

    name = "psb"

    def _formula(self, H, s, y):
        return _psb(H, s, y)


class BofillUpdate(HessianUpdate):
    """Bofill's mixture of SR1 and PSB."""

    name = "bofill"

    def _formula(self, H, s, y):
        r = y - H @ s
        rs, rr, ss = float(r @ s), float(r @ r), float(s @ s)
        if rr == 0.0:
            return H.copy()
        phi = rs * rs / (rr * ss)
        psb = _psb(H, s, y)
        if abs(rs) < SR1_EPS * np.sqrt(rr * ss):
            return psb
        return phi * (H + np.outer(r, r) / rs) + (1.0 - phi) * psb


_UPDATES = {cls.name: cls for cls in (BFGSUpdate, SR1Update, PSBUpdate, BofillUpdate)}


def make_update(name: str, curvature_policy: str = "damp") -> HessianUpdate:
    """Update strategy by name ('bfgs', 'sr1', 'psb', 'bofill')."""
    key = str(name).lower()
    if key not in _UPDATES:
        raise InputError(f"unknown Hessian update {name!r}: valid choices are {', '.join(_UPDATES)}")
    return _UPDATES[key](curvature_policy)
