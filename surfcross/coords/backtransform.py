"""From a step in redundant internal coordinates back to Cartesian coordinates.

A step dq in redundant internals cannot be applied directly: q(x) is non-linear and the
redundant set has more coordinates than degrees of freedom. We iterate

    x_{k+1} = x_k + B^T G^- [q_target - q(x_k)],     G = B B^T,

(Pulay and Fogarasi, J. Chem. Phys. 1992, 96, 2856; Peng, Ayala, Schlegel and Frisch,
J. Comput. Chem. 1996, 17, 49), with dihedral differences wrapped into (-pi, pi]. Only free
atoms move: the columns of B that belong to frozen atoms are dropped, so frozen atoms keep
their positions exactly. Constrained primitives are then polished to their targets by a
minimum-norm Newton correction that touches nothing else to first order.

Safety: if the iteration diverges or does not converge within ``max_iterations``, the best
iterate seen (smallest remaining correction) is used, else the first iterate; a geometry with
non-finite numbers or atoms closer than ``min_distance_bohr`` is unusable, and if no iterate is
usable :class:`~surfcross.errors.BackTransformError` is raised. The optimizer should then take
a shorter step.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np

from ..errors import BackTransformError
from .primitives import Primitive, b_matrix, values, wrap_angle

__all__ = [
    "BackTransformSettings",
    "BackTransformOutcome",
    "generalized_inverse",
    "q_difference",
    "back_transform",
    "rigid_motion_basis",
    "working_b_matrix",
]

log = logging.getLogger(__name__)


@dataclass(frozen=True, kw_only=True)
class BackTransformSettings:
    """Controls of the iterative back-transformation.

    max_iterations
        Cycles of the main iteration.
    rms_tol_bohr
        Converged when the rms Cartesian correction of a cycle is below this.
    divergence_ratio
        Stop when a correction grows beyond this multiple of the smallest one seen.
    constraint_tol
        Constrained primitives must end within this of their target (bohr or radian).
    min_distance_bohr
        A geometry with two atoms closer than this is unusable.
    singular_rel_tol
        Eigenvalues of G below this times the largest one are treated as zero.
    """

    max_iterations: int = 50
    rms_tol_bohr: float = 1e-6
    divergence_ratio: float = 10.0
    constraint_tol: float = 1e-8
    min_distance_bohr: float = 0.5
    singular_rel_tol: float = 1e-8


@dataclass(frozen=True, kw_only=True)
class BackTransformOutcome:
    """Result of one back-transformation.

    coords_bohr
        New Cartesians (natom, 3), bohr.
    iterations
        Cycles of the main iteration used.
    converged
        True when the main iteration met ``rms_tol_bohr``.
    used_fallback
        True when the best or first iterate was taken instead of a converged one.
    residual_rms
        rms of the wrapped q_target - q(new) over all primitives (bohr and radian mixed).
    """

    coords_bohr: np.ndarray
    iterations: int
    converged: bool
    used_fallback: bool
    residual_rms: float


def generalized_inverse(gmat: np.ndarray, rel_tol: float = 1e-8) -> tuple[np.ndarray, np.ndarray]:
    """G^- and the projector G G^- for a symmetric positive semi-definite G (n, n).

    Eigenvalues below ``rel_tol`` times the largest are discarded.
    """
    evals, evecs = np.linalg.eigh(gmat)
    top = float(evals[-1]) if evals.size else 0.0
    keep = evals > rel_tol * max(top, 1e-300)
    kept = evecs[:, keep]
    ginv = (kept / evals[keep]) @ kept.T
    return ginv, kept @ kept.T


def q_difference(prims: list[Primitive] | tuple[Primitive, ...], q_new: np.ndarray, q_old: np.ndarray) -> np.ndarray:
    """q_new - q_old with dihedral differences wrapped into (-pi, pi]."""
    diff = np.asarray(q_new, float) - np.asarray(q_old, float)
    periodic = np.array([p.is_periodic for p in prims], bool)
    if periodic.any():
        diff[periodic] = wrap_angle(diff[periodic])
    return diff


def _free_columns(free: np.ndarray) -> np.ndarray:
    return np.repeat(np.asarray(free, bool), 3)


def rigid_motion_basis(coords_bohr: np.ndarray) -> np.ndarray:
    """Orthonormal rigid translations and rotations, (3N, 6), or (3N, 5) for a linear molecule."""
    xyz = np.asarray(coords_bohr, float).reshape(-1, 3)
    centred = xyz - xyz.mean(axis=0)
    moves = [np.tile(np.eye(3)[k], len(xyz)) for k in range(3)]
    moves += [np.cross(np.eye(3)[k], centred).reshape(-1) for k in range(3)]
    left, sing, _ = np.linalg.svd(np.array(moves).T, full_matrices=False)
    return left[:, sing > 1e-8 * sing[0]]


def working_b_matrix(prims, coords_bohr: np.ndarray, free: np.ndarray) -> np.ndarray:
    """B over the free atoms' columns, (n, 3 nfree).

    With no frozen atom, rigid translations and rotations are projected out of every row.
    True internals are unchanged by this; the lab-frame linear bends lose their small
    dependence on overall rotation, which would otherwise give G tiny eigenvalues and
    unstable steps for nearly (not exactly) straight units.
    """
    xyz = np.asarray(coords_bohr, float).reshape(-1, 3)
    bmat = b_matrix(prims, xyz)
    free = np.asarray(free, bool)
    if free.all():
        basis = rigid_motion_basis(xyz)
        return bmat - (bmat @ basis) @ basis.T
    return bmat[:, _free_columns(free)]


def _correction(prims, xyz: np.ndarray, target: np.ndarray, free: np.ndarray, rel_tol: float) -> np.ndarray:
    """Cartesian correction B_f^T G_f^- (target - q(x)) for the free coordinates, (3 nfree,)."""
    bfree = working_b_matrix(prims, xyz, free)
    ginv, _ = generalized_inverse(bfree @ bfree.T, rel_tol)
    return bfree.T @ (ginv @ q_difference(prims, target, values(prims, xyz)))


def _apply(xyz: np.ndarray, cols: np.ndarray, dx_free: np.ndarray) -> np.ndarray:
    flat = xyz.reshape(-1).copy()
    flat[cols] += dx_free
    return flat.reshape(xyz.shape)


def _usable(xyz: np.ndarray | None, settings: BackTransformSettings) -> bool:
    if xyz is None or not np.all(np.isfinite(xyz)):
        return False
    dist = np.linalg.norm(xyz[:, None, :] - xyz[None, :, :], axis=-1)
    np.fill_diagonal(dist, np.inf)
    return bool(dist.min() >= settings.min_distance_bohr) if len(xyz) > 1 else True


def _iterate(prims, xyz0, target, free, settings):
    """Main loop. Returns (converged geometry or None, best iterate, first iterate, cycles)."""
    xyz, best, best_rms, first = xyz0, None, np.inf, None
    cols = _free_columns(free)
    for cycle in range(1, settings.max_iterations + 1):
        dx = _correction(prims, xyz, target, free, settings.singular_rel_tol)
        rms = float(np.sqrt(np.mean(dx**2))) if dx.size else 0.0
        if not np.isfinite(rms):
            return None, best, first, cycle
        if cycle > 1 and rms < best_rms:
            best, best_rms = xyz, rms
        if rms < settings.rms_tol_bohr:
            return _apply(xyz, cols, dx), best, first, cycle
        if cycle > 1 and rms > settings.divergence_ratio * best_rms:
            log.debug("back-transformation diverging at cycle %d (rms correction %.3g bohr)", cycle, rms)
            return None, best, first, cycle
        xyz = _apply(xyz, cols, dx)
        if cycle == 1:
            first = xyz
    return None, best, first, settings.max_iterations


def _polish(prims, xyz, target, constrained, free, settings) -> np.ndarray:
    """Newton-correct the constrained primitives onto their targets (minimum-norm steps)."""
    sub = [prims[i] for i in constrained]
    goal = np.asarray(target, float)[list(constrained)]
    cols = _free_columns(free)
    for _ in range(30):
        resid = q_difference(sub, goal, values(sub, xyz))
        if np.max(np.abs(resid)) < settings.constraint_tol:
            return xyz
        bsub = working_b_matrix(sub, xyz, free)
        xyz = _apply(xyz, cols, bsub.T @ np.linalg.lstsq(bsub @ bsub.T, resid, rcond=1e-10)[0])
    raise BackTransformError(
        "the constrained bonds/angles/dihedrals could not be brought to their values "
        f"(largest miss {np.max(np.abs(resid)):.2e}); the constraints may contradict each other "
        "or the frozen atoms, or the step was too large"
    )


def back_transform(
    prims: list[Primitive] | tuple[Primitive, ...],
    coords_bohr: np.ndarray,
    target_q: np.ndarray,
    *,
    free_atoms: np.ndarray | None = None,
    constrained: tuple[int, ...] = (),
    settings: BackTransformSettings = BackTransformSettings(),
) -> BackTransformOutcome:
    """Cartesians whose internal coordinates match ``target_q`` as well as possible.

    Parameters
    ----------
    prims
        The primitive set (n primitives).
    coords_bohr
        Start geometry (natom, 3), bohr.
    target_q
        Wanted primitive values (n,), bohr / radian; dihedrals may lie outside (-pi, pi].
    free_atoms
        Boolean mask (natom,); atoms marked False do not move. Default: all free.
    constrained
        Indices of primitives that must match their target to ``constraint_tol``.
    """
    xyz0 = np.asarray(coords_bohr, float).copy()
    free = np.ones(len(xyz0), bool) if free_atoms is None else np.asarray(free_atoms, bool)
    done, best, first, cycles = _iterate(prims, xyz0, target_q, free, settings)
    fallback = done is None or not _usable(done, settings)
    result = done
    if fallback:
        result = next((c for c in (best, first) if _usable(c, settings)), None)
        if result is None:
            raise BackTransformError(
                "a step in internal coordinates could not be turned into a sensible Cartesian "
                "geometry (the iteration diverged or atoms collided); take a shorter step or "
                "use Cartesian coordinates"
            )
        log.warning("back-transformation did not converge in %d cycles; using the best iterate", cycles)
    if constrained:
        result = _polish(prims, result, target_q, constrained, free, settings)
        if not _usable(result, settings):
            raise BackTransformError("enforcing the constraints produced colliding atoms; take a shorter step")
    resid = q_difference(prims, target_q, values(prims, result))
    return BackTransformOutcome(
        coords_bohr=result,
        iterations=cycles,
        converged=not fallback,
        used_fallback=fallback,
        residual_rms=float(np.sqrt(np.mean(resid**2))) if resid.size else 0.0,
    )
