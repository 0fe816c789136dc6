"""The coordinate-system contract used by the optimizer.

A coordinate system maps Cartesian coordinates (natom, 3, bohr) to a flat vector q, carries
gradients and Hessians into q-space, and turns a step dq back into Cartesians. The optimizer
works only with q; objectives only with Cartesians.
"""

from __future__ import annotations

from typing import Protocol, runtime_checkable

import numpy as np

__all__ = ["CoordinateSystem"]


@runtime_checkable
class CoordinateSystem(Protocol):
    name: str

    def values(self, coords_bohr: np.ndarray) -> np.ndarray:
        """q at these Cartesians, (n,)."""

    def gradient(self, coords_bohr: np.ndarray, gradient_cart: np.ndarray) -> np.ndarray:
        """dE/dq from dE/dx (natom, 3); constrained/external directions removed."""

    def hessian(self, coords_bohr: np.ndarray, hessian_cart: np.ndarray) -> np.ndarray:
        """A Cartesian (3N, 3N) Hessian carried into q-space (n, n)."""

    def initial_hessian(self, symbols: tuple[str, ...], coords_bohr: np.ndarray) -> np.ndarray:
        """Model Hessian in q-space (n, n)."""

    def displace(self, coords_bohr: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """New Cartesians (natom, 3) after the step dq (back-transformation for internals)."""

    def project_step(self, coords_bohr: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """Remove components of dq that constraints or external motion forbid."""

    def needs_rebuild(self, coords_bohr: np.ndarray) -> bool:
        """True when the coordinate set no longer suits the geometry (connectivity changed)."""
