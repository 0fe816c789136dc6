"""Model Hessians for the first step of a quasi-Newton search.

The main model is that of Lindh, Bernhardsson, Karlström and Malmqvist, Chem. Phys. Lett.
1995, 241, 423, with the parameter table of that 1995 paper (a later revision with other
row-2/row-3 parameters and extra terms circulates under the same name; it is *not* used here):

    rho_ij = exp[alpha_ij (r_ref,ij^2 - r_ij^2)]
    k_stretch = k_r rho_ij,  k_bend = k_f rho_ij rho_jk,  k_torsion = k_t rho_ij rho_jk rho_kl

with k_r = 0.45 Eh/bohr^2, k_f = 0.15 Eh/rad^2, k_t = 0.005 Eh/rad^2 and alpha, r_ref indexed by
the periodic-table rows (1: H-He, 2: Li-Ne, 3: Na-Ar) of the two atoms.

* :func:`lindh_hessian_cartesian` sums k_t b_t b_t^T over *all* atom pairs, triples and
  quadruples (b_t the B-matrix row of the term), skipping terms whose rho product is below
  ``cutoff``. Rigid translations and rotations are exact zero modes; the caller handles them.
* :func:`lindh_force_constants` gives the diagonal constants for a list of primitives.

Elements beyond row 3 are not parameterized in the 1995 model. Then the Cartesian model
falls back to 0.5 Eh/bohr^2 times the unit matrix, and a primitive that involves such an
atom gets the simple diagonal value of :func:`diagonal_force_constants`. A model Hessian is
only a starting guess; it is corrected by the Hessian updates of the optimizer.
"""

from __future__ import annotations

import itertools
import logging

import numpy as np

from ..elements import period
from . import primitives as prim
from .connectivity import LINEAR_ANGLE_DEG, bend_directions

__all__ = [
    "LINDH_K_STRETCH",
    "LINDH_K_BEND",
    "LINDH_K_TORSION",
    "lindh_rho",
    "lindh_hessian_cartesian",
    "lindh_force_constants",
    "diagonal_force_constants",
    "diagonal_hessian",
    "scaled_identity_hessian",
]

log = logging.getLogger(__name__)

LINDH_K_STRETCH = 0.45  # Eh/bohr^2
LINDH_K_BEND = 0.15  # Eh/rad^2
LINDH_K_TORSION = 0.005  # Eh/rad^2
# alpha (bohr^-2) and r_ref (bohr) by (row_i, row_j), rows 1..3, 1995 table
_ALPHA = np.array([[1.0000, 0.3949, 0.3949], [0.3949, 0.2800, 0.2800], [0.3949, 0.2800, 0.2800]])
_R_REF = np.array([[1.35, 2.10, 2.53], [2.10, 2.87, 3.40], [2.53, 3.40, 3.40]])
#: simple diagonal guess (Eh/bohr^2 for stretches, Eh/rad^2 otherwise)
_SIMPLE = {"bond": 0.5, "angle": 0.2, "linear_bend": 0.2, "out_of_plane": 0.2, "dihedral": 0.1}
#: lower bound for model force constants of primitives (keeps far-apart fragments from
#: giving a singular model Hessian); same units as above
_FLOOR = 1e-3


def _rows(symbols: tuple[str, ...]) -> np.ndarray:
    return np.array([period(s) for s in symbols], int)


def _parameterized(symbols: tuple[str, ...]) -> bool:
    return bool(np.all(_rows(symbols) <= 3))


def lindh_rho(symbols: tuple[str, ...], coords_bohr: np.ndarray) -> np.ndarray:
    """rho_ij for all pairs (natom, natom); diagonal set to zero. Elements must be rows 1-3."""
    xyz = np.asarray(coords_bohr, float)
    rows = _rows(symbols) - 1
    if np.any(rows > 2):
        raise ValueError("the 1995 Lindh model covers only H-Ar")
    r2 = np.sum((xyz[:, None, :] - xyz[None, :, :]) ** 2, axis=-1)
    alpha = _ALPHA[rows[:, None], rows[None, :]]
    rref = _R_REF[rows[:, None], rows[None, :]]
    rho = np.exp(alpha * (rref**2 - r2))
    np.fill_diagonal(rho, 0.0)
    return rho


def _add_term(hess: np.ndarray, p: prim.Primitive, xyz: np.ndarray, k: float) -> None:
    """hess += k b b^T for the B row b of primitive p (restricted to its atoms)."""
    brow = prim.row(p, xyz)
    idx = np.concatenate([np.arange(3 * a, 3 * a + 3) for a in p.atoms])
    vec = brow.reshape(-1)[idx]
    hess[np.ix_(idx, idx)] += k * np.outer(vec, vec)


def _bend_terms(xyz: np.ndarray, i: int, j: int, k: int) -> list[prim.Primitive]:
    """Angle i-j-k, or its two linear-bend components when the angle is near 180 deg.

    Folded triples (angle near 0, i and k on the same side of j, as for the end atoms of a
    linear molecule) have no usable bend coordinate and give no term.
    """
    angle = prim.Primitive("angle", (i, j, k))
    degrees = np.degrees(prim.value(angle, xyz))
    if degrees <= 180.0 - LINEAR_ANGLE_DEG:
        return []
    if degrees < LINEAR_ANGLE_DEG:
        return [angle]
    return [prim.Primitive("linear_bend", (i, j, k), direction=tuple(w)) for w in bend_directions(xyz, i, k)]


def _straight(xyz: np.ndarray, i: int, j: int, k: int) -> bool:
    angle = np.degrees(prim.value(prim.Primitive("angle", (i, j, k)), xyz))
    return bool(angle >= LINEAR_ANGLE_DEG or angle <= 180.0 - LINEAR_ANGLE_DEG)


def _torsion_terms(hess: np.ndarray, xyz: np.ndarray, rho: np.ndarray, cutoff: float) -> None:
    n = len(xyz)
    for j, k in itertools.combinations(range(n), 2):
        if rho[j, k] < cutoff:
            continue
        front = [i for i in range(n) if i not in (j, k) and rho[i, j] * rho[j, k] >= cutoff]
        back = [l for l in range(n) if l not in (j, k) and rho[j, k] * rho[k, l] >= cutoff]
        for i, l in itertools.product(front, back):
            if i == l or rho[i, j] * rho[j, k] * rho[k, l] < cutoff:
                continue
            if _straight(xyz, i, j, k) or _straight(xyz, j, k, l):
                continue
            p = prim.Primitive("dihedral", (i, j, k, l))
            _add_term(hess, p, xyz, LINDH_K_TORSION * rho[i, j] * rho[j, k] * rho[k, l])


def lindh_hessian_cartesian(symbols: tuple[str, ...], coords_bohr: np.ndarray, cutoff: float = 1e-8) -> np.ndarray:
    """Cartesian Lindh (1995) model Hessian, (3N, 3N), Eh/bohr^2.

    Sum over all pairs (stretch), triples (bend; two linear-bend components when the triple
    is near straight, none when it is folded) and quadruples (torsion, skipped when one of its angles is near
    straight) whose rho product is at least ``cutoff``. External modes are left in as
    (near-)zero eigenvalues. Falls back to 0.5 * unit matrix when an element beyond Ar occurs.
    """
    xyz = np.asarray(coords_bohr, float)
    n = len(xyz)
    if not _parameterized(symbols):
        log.warning("the Lindh model covers H-Ar only; using 0.5 Eh/bohr^2 times the unit matrix")
        return scaled_identity_hessian(n)
    rho = lindh_rho(symbols, xyz)
    hess = np.zeros((3 * n, 3 * n))
    for i, j in itertools.combinations(range(n), 2):
        if rho[i, j] >= cutoff:
            _add_term(hess, prim.Primitive("bond", (i, j)), xyz, LINDH_K_STRETCH * rho[i, j])
    for j in range(n):
        for i, k in itertools.combinations([a for a in range(n) if a != j], 2):
            weight = rho[i, j] * rho[j, k]
            if weight >= cutoff:
                for p in _bend_terms(xyz, i, j, k):
                    _add_term(hess, p, xyz, LINDH_K_BEND * weight)
    _torsion_terms(hess, xyz, rho, cutoff)
    return hess


def _pairs_of(p: prim.Primitive) -> list[tuple[int, int]]:
    """Atom pairs whose rho enter the force constant of primitive p."""
    a = p.atoms
    if p.kind == "bond":
        return [(a[0], a[1])]
    if p.kind in ("angle", "linear_bend"):
        return [(a[0], a[1]), (a[1], a[2])]
    if p.kind == "dihedral":
        return [(a[0], a[1]), (a[1], a[2]), (a[2], a[3])]
    centre = a[0]
    return [(centre, a[1]), (centre, a[2]), (centre, a[3])]


def lindh_force_constants(symbols: tuple[str, ...], coords_bohr: np.ndarray, prims) -> np.ndarray:
    """Diagonal Lindh force constants for a list of primitives, (n,).

    bond: k_r rho; angle and linear bend: k_f rho rho; dihedral: k_t rho rho rho.
    Out-of-plane (no such term in the 1995 model; our choice): k_f rho_ca rho_cb rho_cd,
    a bend-type constant, because pyramidalizing a planar centre is resisted like a bend.
    Primitives with an atom beyond Ar take :func:`diagonal_force_constants` values.
    All values are bounded below by 1e-3 (far-apart fragment links would otherwise be
    nearly free).
    """
    xyz = np.asarray(coords_bohr, float)
    simple = diagonal_force_constants(prims)
    rows = _rows(symbols)
    light = [i for i in range(len(symbols)) if rows[i] <= 3]
    rho = np.zeros((len(symbols), len(symbols)))
    if light:
        sub = lindh_rho(tuple(symbols[i] for i in light), xyz[light])
        rho[np.ix_(light, light)] = sub
    scale = {"bond": LINDH_K_STRETCH, "angle": LINDH_K_BEND, "linear_bend": LINDH_K_BEND,
             "dihedral": LINDH_K_TORSION, "out_of_plane": LINDH_K_BEND}
    out = np.empty(len(prims))
    for t, p in enumerate(prims):
        if np.any(rows[list(p.atoms)] > 3):
            out[t] = simple[t]
            continue
        out[t] = scale[p.kind] * np.prod([rho[i, j] for i, j in _pairs_of(p)])
    return np.maximum(out, _FLOOR)


def diagonal_force_constants(prims) -> np.ndarray:
    """Simple guess (n,): 0.5 Eh/bohr^2 stretch, 0.2 Eh/rad^2 bends and out-of-plane, 0.1 torsion."""
    return np.array([_SIMPLE[p.kind] for p in prims], float)


def diagonal_hessian(prims) -> np.ndarray:
    """Diagonal (n, n) matrix of :func:`diagonal_force_constants`."""
    return np.diag(diagonal_force_constants(prims))


def scaled_identity_hessian(natom: int, scale: float = 0.5) -> np.ndarray:
    """scale * unit matrix, (3N, 3N), Eh/bohr^2: the plainest Cartesian guess."""
    return scale * np.eye(3 * natom)
