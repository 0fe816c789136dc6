"""Cartesian coordinates for the optimizer: q is the flattened (3N,) coordinate vector in bohr.

Overall translation and rotation do not change the energy of an isolated molecule, but noisy
gradients carry small net forces and torques, and a quasi-Newton step may drift along them.
With ``project_external=True`` the gradient and every step are projected orthogonally (in the
plain Euclidean metric) onto the complement of the rigid-body directions at the current
geometry: three translations and three rotations about the centre (two for a linear molecule),
orthonormalized by a singular-value decomposition. This is the usual linearized Eckart condition
(common practice). After a step the molecule is shifted back so that its centre of mass (with
``symbols`` given; the plain centroid otherwise) does not move; a pure translation changes
neither the energy nor the gradient of an isolated molecule.

Frozen atoms keep their position: their gradient rows and step components are set to zero.
Frozen atoms already fix the frame, so external-mode projection is switched off when any atom
is frozen (projecting both would couple the two constraints).

For one- and two-atom analytic test surfaces, which are not rotation invariant, use
``project_external=False``.
"""

from __future__ import annotations

import logging
from typing import Sequence

import numpy as np

from .. import elements
from ..errors import InputError

__all__ = ["CartesianCoordinates", "external_basis"]

logger = logging.getLogger(__name__)

#: curvature (Eh/bohr^2) put on the rigid-body directions of the q-space Hessian, so that the
#: working Hessian stays non-singular; the gradient and steps have no component there anyway
EXTERNAL_CURVATURE = 1.0
#: scaled identity used when the model Hessian module is unavailable (Eh/bohr^2)
FALLBACK_CURVATURE = 0.5


def external_basis(coords_bohr: np.ndarray, tol: float = 1e-8) -> np.ndarray:
    """Orthonormal rigid-body directions (translations and rotations) at a geometry.

    Parameters
    ----------
    coords_bohr
        Cartesian coordinates, (natom, 3), bohr.
    tol
        Relative singular-value cut; directions below it are dropped (a linear molecule has
        two rotations, one atom none).

    Returns
    -------
    numpy.ndarray
        (m, 3N) rows, orthonormal, with m = 6, 5 (linear) or 3 (one atom).
    """
    x = np.asarray(coords_bohr, float).reshape(-1, 3)
    natom = len(x)
    centred = x - x.mean(axis=0)
    vecs = []
    for axis in range(3):
        t = np.zeros((natom, 3))
        t[:, axis] = 1.0
        vecs.append(t.ravel())
    for axis in range(3):
        e = np.zeros(3)
        e[axis] = 1.0
        vecs.append(np.cross(e, centred).ravel())
    V = np.array(vecs)
    U, sv, _ = np.linalg.svd(V.T, full_matrices=False)
    keep = sv > tol * max(sv[0], 1.0)
    return U[:, keep].T


class CartesianCoordinates:
    """Flattened Cartesian coordinates (bohr) with optional rigid-body and frozen-atom removal.

    Parameters
    ----------
    natom
        Number of atoms.
    project_external
        Remove overall translation and rotation from gradients and steps (see module notes).
        Ignored (off) when any atom is frozen.
    frozen_atoms
        0-based indices of atoms that must not move.
    symbols
        Element symbols; used for the mass-weighted centre kept fixed after each step and as
        the default for the model Hessian.
    """

    name = "cartesian"

    def __init__(self, natom: int, *, project_external: bool = True,
                 frozen_atoms: Sequence[int] = (), symbols: Sequence[str] | None = None) -> None:
        natom = int(natom)
        if natom < 1:
            raise InputError(f"Cartesian coordinates need at least one atom, got {natom}")
        frozen = tuple(sorted({int(a) for a in frozen_atoms}))
        if frozen and (frozen[0] < 0 or frozen[-1] >= natom):
            raise InputError(
                f"frozen atom indices {frozen} must lie between 0 and {natom - 1} (0-based)"
            )
        if len(frozen) == natom:
            raise InputError("every atom is frozen: nothing left to optimize")
        if symbols is not None:
            symbols = tuple(elements.normalize_symbol(s) for s in symbols)
            if len(symbols) != natom:
                raise InputError(f"{len(symbols)} symbols given for {natom} atoms")
        self.natom = natom
        self.frozen_atoms = frozen
        self.symbols = symbols
        self.project_external = bool(project_external) and not frozen and natom > 1
        if project_external and frozen:
            logger.info("frozen atoms fix the frame: overall rotation/translation not projected")
        mobile = np.ones((natom, 3))
        mobile[list(frozen)] = 0.0
        self._mobile = mobile.ravel()
        if symbols is not None:
            self._weights = np.array([elements.mass_amu(s) for s in symbols])
        else:
            self._weights = np.ones(natom)

    # ------------------------------------------------------------------ helpers
    def _check(self, coords_bohr: np.ndarray) -> np.ndarray:
        x = np.asarray(coords_bohr, float)
        if x.size != 3 * self.natom:
            raise InputError(
                f"coordinates with {x.size} values given to a {self.natom}-atom coordinate system"
            )
        return x.reshape(self.natom, 3)

    def projector(self, coords_bohr: np.ndarray) -> np.ndarray:
        """(3N, 3N) orthogonal projector onto the allowed Cartesian directions."""
        x = self._check(coords_bohr)
        P = np.diag(self._mobile)
        if self.project_external:
            V = external_basis(x)
            P = np.eye(3 * self.natom) - V.T @ V
        return P

    def project_cartesian(self, coords_bohr: np.ndarray, vector: np.ndarray) -> np.ndarray:
        """Project a Cartesian vector (natom, 3) or (3N,) onto the allowed directions.

        Returns the same shape as given.
        """
        v = np.asarray(vector, float)
        out = self.projector(coords_bohr) @ v.ravel()
        return out.reshape(v.shape)

    # ------------------------------------------------------------------ protocol
    def values(self, coords_bohr: np.ndarray) -> np.ndarray:
        """q = the flattened coordinates, (3N,), bohr."""
        return self._check(coords_bohr).ravel().copy()

    def gradient(self, coords_bohr: np.ndarray, gradient_cart: np.ndarray) -> np.ndarray:
        """dE/dq (3N,) with rigid-body or frozen-atom components removed."""
        g = np.asarray(gradient_cart, float).ravel()
        if g.size != 3 * self.natom:
            raise InputError(f"gradient with {g.size} values for {self.natom} atoms")
        return self.projector(coords_bohr) @ g

    def hessian(self, coords_bohr: np.ndarray, hessian_cart: np.ndarray) -> np.ndarray:
        """P H P plus a fixed curvature on the removed directions, (3N, 3N).

        The removed directions (rigid-body motion or frozen atoms) get
        :data:`EXTERNAL_CURVATURE`, decoupled from the rest: the gradient has no component
        along them, so a rational-function step never moves along them.
        """
        n = 3 * self.natom
        H = np.asarray(hessian_cart, float)
        if H.shape != (n, n):
            raise InputError(f"Hessian of shape {H.shape} for {self.natom} atoms, expected ({n}, {n})")
        P = self.projector(coords_bohr)
        Hq = P @ H @ P + EXTERNAL_CURVATURE * (np.eye(n) - P)
        return 0.5 * (Hq + Hq.T)

    def initial_hessian(self, symbols: tuple[str, ...] | None, coords_bohr: np.ndarray) -> np.ndarray:
        """Model Hessian in q-space.

        Uses the Lindh model from :mod:`surfcross.coords.hessian` when that module is present;
        otherwise a scaled identity (0.5 Eh/bohr^2). Rigid-body/frozen directions are handled
        as in :meth:`hessian`.
        """
        x = self._check(coords_bohr)
        symbols = self.symbols if symbols is None else tuple(symbols)
        H = None
        if symbols is not None:
            try:
                from .hessian import lindh_hessian_cartesian
            except ImportError:
                logger.info("model Hessian module not available; using a scaled identity")
            else:
                H = np.asarray(lindh_hessian_cartesian(tuple(symbols), x), float)
        if H is None:
            H = FALLBACK_CURVATURE * np.eye(3 * self.natom)
        return self.hessian(x, H)

    def project_step(self, coords_bohr: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """Remove rigid-body (or frozen-atom) components of a step, (3N,)."""
        d = np.asarray(dq, float).ravel()
        return self.projector(coords_bohr) @ d

    def displace(self, coords_bohr: np.ndarray, dq: np.ndarray) -> np.ndarray:
        """x + dq, then shifted so that the (mass-weighted) centre stays where it was."""
        x = self._check(coords_bohr)
        d = np.asarray(dq, float).reshape(self.natom, 3).copy()
        d[self._mobile.reshape(self.natom, 3) == 0.0] = 0.0
        new = x + d
        if self.project_external:
            w = self._weights / self._weights.sum()
            new = new - (w[:, None] * d).sum(axis=0)
        return new

    def needs_rebuild(self, coords_bohr: np.ndarray) -> bool:
        """Cartesian coordinates suit every geometry: always False."""
        return False

    def __repr__(self) -> str:
        return (f"CartesianCoordinates(natom={self.natom}, project_external={self.project_external},"
                f" frozen_atoms={self.frozen_atoms})")
