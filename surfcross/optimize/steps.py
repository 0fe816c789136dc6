"""Step rules: rational-function (RFO) steps with a restricted step length, and the quadratic
model used to predict the energy change of the step actually taken. Pure functions.

RFO (Banerjee, Adams, Simons, Shepard, J. Phys. Chem. 1985, 89, 52; citation recalled from
memory): the lowest eigenpair of the augmented Hessian [[H, g], [g^T, 0]] gives
s = -(H - lambda 1)^-1 g with lambda below the lowest eigenvalue of H, so the step goes
downhill even when H is indefinite. When |s| exceeds the trust radius tau the shift is lowered
further until |s| = tau; this is the same one-parameter family of steps that restricted-step RFO
scans, solved here directly in the eigenbasis of H.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["StepProposal", "rfo_step", "quadratic_change", "shifted_step", "working_hessian",
           "cap_atom_displacement"]


@dataclass(frozen=True, kw_only=True)
class StepProposal:
    """A proposed step.

    Attributes
    ----------
    step
        The step in q-space, (n,).
    shift
        The level shift lambda with s = -(H - lambda 1)^-1 g.
    restricted
        True when the step was shortened to the trust radius.
    predicted_change
        Quadratic-model change g.s + s.H.s/2 of this step (Eh).
    """

    step: np.ndarray
    shift: float
    restricted: bool
    predicted_change: float


def quadratic_change(gradient: np.ndarray, hessian: np.ndarray, step: np.ndarray) -> float:
    """Second-order model of the change along ``step``: g.s + s.H.s / 2 (Eh)."""
    s = np.asarray(step, float)
    return float(gradient @ s + 0.5 * s @ hessian @ s)


def shifted_step(evals: np.ndarray, gbar: np.ndarray, shift: float) -> np.ndarray:
    """Components in the eigenbasis of -(H - shift)^-1 g (``gbar`` = eigvecs^T g).

    Directions without a gradient component get no step.
    """
    out = np.zeros_like(gbar)
    nz = gbar != 0.0
    out[nz] = -gbar[nz] / (evals[nz] - shift)
    return out


def _rfo_shift(evals: np.ndarray, gbar: np.ndarray) -> float:
    """Lowest eigenvalue of the augmented Hessian, written in the eigenbasis of H.

    Only eigen-directions that carry gradient enter; the others decouple from the augmented
    problem and would not move anyway.
    """
    active = np.abs(gbar) > 1e-15 * np.linalg.norm(gbar)
    e, b = evals[active], gbar[active]
    n = len(e)
    aug = np.zeros((n + 1, n + 1))
    aug[np.arange(n), np.arange(n)] = e
    aug[:n, n] = b
    aug[n, :n] = b
    return float(np.linalg.eigvalsh(aug)[0])


def _restrict(evals: np.ndarray, gbar: np.ndarray, shift: float, radius: float) -> float:
    """Lower ``shift`` until |s(shift)| = radius (|s| decreases monotonically as shift falls)."""
    hi = shift
    width = max(np.linalg.norm(gbar) / radius, 1e-12)
    lo = hi - width
    while np.linalg.norm(shifted_step(evals, gbar, lo)) > radius:
        width *= 2.0
        lo = hi - width
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if np.linalg.norm(shifted_step(evals, gbar, mid)) > radius:
            hi = mid
        else:
            lo = mid
        if hi - lo <= 1e-14 * max(1.0, abs(lo)):
            break
    return lo


def rfo_step(gradient: np.ndarray, hessian: np.ndarray, trust_radius: float) -> StepProposal:
    """Rational-function step, restricted to ``trust_radius``.

    Parameters
    ----------
    gradient
        (n,) gradient in q-space.
    hessian
        (n, n) symmetric Hessian (may be indefinite).
    trust_radius
        Largest allowed Euclidean step length.

    Returns
    -------
    StepProposal
        The step (length <= trust_radius up to rounding), its shift and predicted change.
    """
    g = np.asarray(gradient, float).ravel()
    H = 0.5 * (np.asarray(hessian, float) + np.asarray(hessian, float).T)
    evals, evecs = np.linalg.eigh(H)
    gbar = evecs.T @ g
    gbar[np.abs(gbar) <= 1e-15 * np.linalg.norm(gbar)] = 0.0
    if not np.any(gbar):
        zero = np.zeros_like(g)
        return StepProposal(step=zero, shift=0.0, restricted=False, predicted_change=0.0)
    shift = _rfo_shift(evals, gbar)
    restricted = False
    if np.linalg.norm(shifted_step(evals, gbar, shift)) > trust_radius:
        shift = _restrict(evals, gbar, shift, trust_radius)
        restricted = True
    step = evecs @ shifted_step(evals, gbar, shift)
    return StepProposal(step=step, shift=shift, restricted=restricted,
                        predicted_change=quadratic_change(g, H, step))


def working_hessian(hessian: np.ndarray, directions: np.ndarray, curvatures: np.ndarray) -> np.ndarray:
    """P H P + sum_k c_k v_k v_k^T with P = 1 - V^T V (composed objectives).

    Parameters
    ----------
    hessian
        (n, n) quasi-Newton Hessian.
    directions
        (k, n) orthonormal directions v_k.
    curvatures
        (k,) curvatures c_k, Eh/bohr^2.
    """
    V = np.atleast_2d(np.asarray(directions, float))
    c = np.atleast_1d(np.asarray(curvatures, float))
    P = np.eye(hessian.shape[0]) - V.T @ V
    Hw = P @ hessian @ P + (V.T * c) @ V
    return 0.5 * (Hw + Hw.T)


def cap_atom_displacement(step_cart: np.ndarray, max_atom_step: float | None) -> float:
    """Factor (<= 1) that keeps every atom's displacement within ``max_atom_step`` (bohr)."""
    if max_atom_step is None:
        return 1.0
    d = np.linalg.norm(np.asarray(step_cart, float).reshape(-1, 3), axis=1).max()
    return 1.0 if d <= max_atom_step else float(max_atom_step / d)
