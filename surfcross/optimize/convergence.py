"""Convergence tests: every criterion reported as value, threshold and pass/fail.

Forces are tested component-wise on the Cartesian test gradient (max |g_i| and the root mean
square over all 3N components), steps on the Cartesian displacement that led to the current
geometry, and the energy change on the objective value (common practice for minima).
"""

from __future__ import annotations

from typing import Any, Sequence

import numpy as np

from ..coords.cartesian import external_basis
from ..objectives.base import Criterion
from .settings import ConvergenceSettings

__all__ = ["evaluate_criteria", "all_passed", "cartesian_test_gradient"]


def cartesian_test_gradient(coords: Any, coords_bohr: np.ndarray, gradient: np.ndarray) -> np.ndarray:
    """Cartesian gradient for the force tests, without removed or constrained directions.

    Uses the coordinate system's own Cartesian projection (``project_cartesian``) when it has
    one; for systems with a Wilson B matrix, B^T g_q (the part of the gradient the
    coordinates can act on, frozen atoms zeroed); otherwise only rigid-body motion is removed.
    """
    g = np.asarray(gradient, float)
    x = np.asarray(coords_bohr, float)
    project = getattr(coords, "project_cartesian", None)
    if callable(project):
        return np.asarray(project(x, g)).reshape(g.shape)
    bmat = getattr(coords, "b_matrix", None)
    if callable(bmat):
        out = (np.asarray(bmat(x)).T @ coords.gradient(x, g)).reshape(g.shape)
        out[list(getattr(coords, "frozen_atoms", ()))] = 0.0
        return out
    if len(x) >= 3:
        V = external_basis(x)
        return (g.ravel() - V.T @ (V @ g.ravel())).reshape(g.shape)
    return g


def _max_rms(v: np.ndarray) -> tuple[float, float]:
    a = np.asarray(v, float).ravel()
    if a.size == 0:
        return 0.0, 0.0
    return float(np.abs(a).max()), float(np.sqrt(np.mean(a * a)))


def evaluate_criteria(settings: ConvergenceSettings, test_gradient: np.ndarray,
                      step_cart: np.ndarray | None, energy_change: float | None,
                      extra: Sequence[Criterion] = ()) -> tuple[Criterion, ...]:
    """All convergence tests at one geometry.

    Parameters
    ----------
    settings
        Thresholds; a ``None`` threshold leaves that test out.
    test_gradient
        Cartesian gradient to test (natom, 3), Eh/bohr, with removed directions projected out.
    step_cart
        Cartesian step that led here, bohr; None at the start (step tests left out).
    energy_change
        Value change since the previous accepted geometry, Eh; None at the start.
    extra
        Objective-specific criteria (e.g. the gap), appended as given.
    """
    out: list[Criterion] = []
    gmax, grms = _max_rms(test_gradient)
    if settings.max_force is not None:
        out.append(Criterion("max force", gmax, settings.max_force, "Eh/bohr"))
    if settings.rms_force is not None:
        out.append(Criterion("rms force", grms, settings.rms_force, "Eh/bohr"))
    if step_cart is not None:
        smax, srms = _max_rms(step_cart)
        if settings.max_step is not None:
            out.append(Criterion("max step", smax, settings.max_step, "bohr"))
        if settings.rms_step is not None:
            out.append(Criterion("rms step", srms, settings.rms_step, "bohr"))
    if energy_change is not None and settings.energy_change is not None:
        out.append(Criterion("energy change", float(energy_change), settings.energy_change, "Eh"))
    out.extend(extra)
    return tuple(out)


def all_passed(criteria: Sequence[Criterion]) -> bool:
    """True when there is at least one criterion and all pass."""
    return bool(criteria) and all(c.passed for c in criteria)
