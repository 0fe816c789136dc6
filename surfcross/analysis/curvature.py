"""Curvature check of a stationary point: finite-difference Hessian and harmonic frequencies.

The Hessian of one state is built by central differences of its analytic gradients
(2 x 3N gradient evaluations). For an excited state the root is identified at every displaced
geometry by wavefunction overlap with the centre, so a near-degenerate neighbour cannot leak
into the Hessian. Translations and rotations are projected out of the mass-weighted Hessian
before diagonalization; frequencies are reported in cm^-1, imaginary ones as negative numbers.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from ..engine.base import Engine, Evaluation
from ..geometry import Geometry
from ..states import StateLabel, parse_state
from ..units import AU_FREQUENCY_IN_WAVENUMBER, HARTREE_IN_EV, HARTREE_IN_WAVENUMBER

__all__ = ["CurvatureResult", "finite_difference_hessian", "harmonic_analysis",
           "external_modes", "check_curvature", "displace_along"]

log = logging.getLogger(__name__)

#: frequencies of magnitude below this (cm^-1) are treated as numerical noise, not modes
NOISE_WAVENUMBER = 20.0


@dataclass(frozen=True)
class CurvatureResult:
    """Harmonic analysis of one state at one geometry.

    Attributes
    ----------
    frequencies_cm
        Vibrational frequencies (cm^-1), ascending; imaginary modes as negative numbers.
    modes
        Cartesian displacement vectors of the vibrations, (nmode, natom, 3), normalized.
    hessian
        Cartesian Hessian (3N, 3N), Eh/bohr^2, symmetrized.
    zero_point_eh
        Harmonic zero-point energy (Eh), from the real frequencies.
    evaluations
        Engine evaluations used.
    """

    state: str
    frequencies_cm: np.ndarray
    modes: np.ndarray
    hessian: np.ndarray
    zero_point_eh: float
    evaluations: int
    roots_seen: tuple[str, ...] = field(default_factory=tuple)

    @property
    def imaginary(self) -> np.ndarray:
        """Frequencies of imaginary modes beyond the noise level (negative, cm^-1)."""
        return self.frequencies_cm[self.frequencies_cm < -NOISE_WAVENUMBER]

    @property
    def is_minimum(self) -> bool:
        return self.imaginary.size == 0

    def to_dict(self) -> dict:
        return {
            "state": self.state,
            "frequencies_cm": [round(float(f), 2) for f in self.frequencies_cm],
            "imaginary_cm": [round(float(f), 2) for f in self.imaginary],
            "is_minimum": self.is_minimum,
            "zero_point_ev": self.zero_point_eh * HARTREE_IN_EV,
            "zero_point_eh": self.zero_point_eh,
            "evaluations": self.evaluations,
        }


def external_modes(coords_bohr: np.ndarray, masses_amu: np.ndarray) -> np.ndarray:
    """Orthonormal mass-weighted translation and rotation vectors, (k, 3N), k = 5 or 6."""
    coords = np.asarray(coords_bohr, float)
    sqm = np.sqrt(np.asarray(masses_amu, float))
    com = (masses_amu[:, None] * coords).sum(0) / masses_amu.sum()
    r = coords - com
    vecs = []
    for axis in np.eye(3):
        vecs.append((sqm[:, None] * axis[None, :]).ravel())
    for axis in np.eye(3):
        vecs.append((sqm[:, None] * np.cross(axis[None, :], r)).ravel())
    V = np.array(vecs)
    # orthonormalize, dropping the dependent rotation of a linear molecule
    u, s, _ = np.linalg.svd(V.T, full_matrices=False)
    return u[:, s > 1e-6 * s.max()].T


def finite_difference_hessian(gradient: Callable[[np.ndarray], np.ndarray],
                              coords_bohr: np.ndarray, step_bohr: float = 5e-3) -> np.ndarray:
    """Central-difference Hessian (3N, 3N) from a gradient function of Cartesians (natom, 3)."""
    x0 = np.asarray(coords_bohr, float)
    n = x0.size
    H = np.zeros((n, n))
    for k in range(n):
        dx = np.zeros(n)
        dx[k] = step_bohr
        gp = gradient((x0.ravel() + dx).reshape(x0.shape)).ravel()
        gm = gradient((x0.ravel() - dx).reshape(x0.shape)).ravel()
        H[:, k] = (gp - gm) / (2.0 * step_bohr)
    return 0.5 * (H + H.T)


def harmonic_analysis(hessian: np.ndarray, coords_bohr: np.ndarray,
                      masses_amu: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Frequencies (cm^-1, imaginary negative) and normalized Cartesian modes (nmode, natom, 3).

    The mass-weighted Hessian is projected onto the complement of translations and rotations,
    so exactly 3N - 6 (3N - 5 for linear molecules) vibrations are returned.
    """
    m = np.asarray(masses_amu, float)
    natom = len(m)
    inv_sqm = np.repeat(1.0 / np.sqrt(m), 3)
    Hmw = hessian * inv_sqm[:, None] * inv_sqm[None, :]
    E = external_modes(coords_bohr, m)
    # basis of the internal (vibrational) space
    P = np.eye(3 * natom) - E.T @ E
    w, U = np.linalg.eigh(P)
    D = U[:, w > 0.5]
    lam, C = np.linalg.eigh(D.T @ Hmw @ D)
    freqs = np.sign(lam) * np.sqrt(np.abs(lam)) * AU_FREQUENCY_IN_WAVENUMBER
    modes_mw = D @ C
    modes = (modes_mw * inv_sqm[:, None]).T
    modes /= np.linalg.norm(modes, axis=1)[:, None]
    return freqs, modes.reshape(-1, natom, 3)


def _tracked_gradient(engine: Engine, centre: Evaluation, label: StateLabel,
                      roots_seen: list[str]) -> Callable[[np.ndarray], np.ndarray]:
    """Gradient of the state that carries ``label``'s character at displaced geometries."""
    geom = centre.geometry
    manifold = label.manifold
    centre_states = [s.label for s in centre.manifold(manifold)]
    row = centre_states.index(label)

    def gradient(coords: np.ndarray) -> np.ndarray:
        ev = engine.states(geom.with_coords(coords))
        if len(centre_states) > 1:
            S = engine.overlaps(centre, ev)[manifold]
            col = int(np.argmax(np.abs(S[row])))
            root = ev.manifold(manifold)[col].label
        else:
            root = label
        roots_seen.append(str(root))
        ev = engine.gradients(ev, [root])
        return np.asarray(ev.gradient(root))

    return gradient


def check_curvature(engine: Engine, geometry: Geometry, state: StateLabel | str,
                    step_bohr: float = 5e-3) -> CurvatureResult:
    """Finite-difference Hessian and harmonic frequencies of ``state`` at ``geometry``.

    Costs 6N engine evaluations with gradients. The root is followed by overlap with the
    centre geometry at every displacement.
    """
    label = parse_state(state)
    centre = engine.states(geometry)
    centre.state(label)  # InputError naming the computed states when ``state`` is not among them
    roots: list[str] = []
    grad = _tracked_gradient(engine, centre, label, roots)
    log.info("curvature check of %s: %d gradient evaluations", label, 6 * geometry.natom)
    H = finite_difference_hessian(grad, geometry.coords_bohr, step_bohr)
    freqs, modes = harmonic_analysis(H, geometry.coords_bohr, geometry.masses_amu)
    real = freqs[freqs > 0]
    zpe = 0.5 * real.sum() / HARTREE_IN_WAVENUMBER
    return CurvatureResult(str(label), freqs, modes, H, float(zpe), 1 + 6 * geometry.natom,
                           tuple(sorted(set(roots))))


def displace_along(geometry: Geometry, mode: np.ndarray, amplitude_bohr: float = 0.1) -> Geometry:
    """The geometry displaced along a (normalized) Cartesian mode, e.g. to leave a saddle point."""
    mode = np.asarray(mode, float).reshape(geometry.natom, 3)
    mode = mode / np.linalg.norm(mode)
    return geometry.with_coords(geometry.coords_bohr + amplitude_bohr * mode)

