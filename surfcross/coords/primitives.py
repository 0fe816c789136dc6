"""Primitive internal coordinates: values and analytic Cartesian derivatives.

A primitive is a bond length, a valence angle, one component of a linear bend, a proper
dihedral or an out-of-plane angle. Each has a value (bohr or radian) and a Wilson B-matrix
row, the derivative of the value with respect to the Cartesian coordinates of its atoms.

Conventions
-----------
* Coordinates ``xyz`` are (natom, 3) arrays in bohr.
* ``value(p, xyz)`` returns a float (bohr for bonds, radian for everything else).
* ``row(p, xyz)`` returns a dense (natom, 3) array; only the atoms of ``p`` are non-zero.
* Dihedral values lie in (-pi, pi]; the sign follows the usual IUPAC torsion convention
  (looking along the b->c bond, positive when the front bond a-b turns clockwise onto c-d).
  Differences of dihedrals must be wrapped with :func:`wrap_angle`.

The formulas are the standard vector-algebra derivatives (Wilson, Decius and Cross,
*Molecular Vibrations*, 1955, ch. 4; the dihedral derivative in the compact form of
Blondel and Karplus, J. Comput. Chem. 1996, 17, 1132). The linear-bend and out-of-plane
definitions are our own simple choices and are described at the functions.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Primitive", "PRIMITIVE_KINDS", "value", "row", "b_matrix", "values", "wrap_angle", "label"]

#: kind -> number of atoms
PRIMITIVE_KINDS = {"bond": 2, "angle": 3, "linear_bend": 3, "dihedral": 4, "out_of_plane": 4}


@dataclass(frozen=True)
class Primitive:
    """One primitive internal coordinate.

    kind
        One of :data:`PRIMITIVE_KINDS`.
    atoms
        0-based atom indices. bond (i, j); angle and linear_bend (a, centre, c);
        dihedral (a, b, c, d) about the b-c bond; out_of_plane (centre, a, b, d): the angle
        between the centre->d bond and the plane of centre, a, b.
    direction
        Linear bends only: the unit vector (lab frame, fixed when the coordinate set is
        built) along which this bend component is measured.
    link
        True for a bond added only to join separate fragments (not a covalent bond).
    """

    kind: str
    atoms: tuple[int, ...]
    direction: tuple[float, float, float] | None = None
    link: bool = False

    def __post_init__(self) -> None:
        if self.kind not in PRIMITIVE_KINDS:
            raise ValueError(f"unknown primitive kind {self.kind!r}")
        if len(self.atoms) != PRIMITIVE_KINDS[self.kind]:
            raise ValueError(f"a {self.kind} needs {PRIMITIVE_KINDS[self.kind]} atoms")
        if (self.kind == "linear_bend") != (self.direction is not None):
            raise ValueError("a direction is given for linear bends and only for them")

    @property
    def is_periodic(self) -> bool:
        """True when values differ by 2 pi are the same geometry (dihedrals)."""
        return self.kind == "dihedral"


def wrap_angle(angle: np.ndarray | float) -> np.ndarray | float:
    """Map angles (radian) into (-pi, pi]."""
    wrapped = np.pi - np.mod(np.pi - np.asarray(angle, float), 2.0 * np.pi)
    return float(wrapped) if np.ndim(wrapped) == 0 else wrapped


def label(p: Primitive, symbols: tuple[str, ...]) -> str:
    """Human-readable name with 1-based atom numbers, e.g. 'bond O1-H2'."""
    names = [f"{symbols[i]}{i + 1}" for i in p.atoms]
    if p.kind == "out_of_plane":
        return f"out_of_plane {names[3]} from plane {names[1]}-{names[0]}-{names[2]}"
    text = f"{p.kind} {'-'.join(names)}"
    return text + " (fragment link)" if p.link else text


def _cross(u: np.ndarray, v: np.ndarray) -> np.ndarray:
    """Cross product of two 3-vectors (np.cross is slow for single small vectors)."""
    return np.array([u[1] * v[2] - u[2] * v[1], u[2] * v[0] - u[0] * v[2], u[0] * v[1] - u[1] * v[0]])


def _unit(vec: np.ndarray) -> tuple[np.ndarray, float]:
    norm = float(np.linalg.norm(vec))
    return vec / norm, norm


# --- bond ------------------------------------------------------------------------------

def _bond(xyz: np.ndarray, atoms: tuple[int, ...]) -> tuple[float, dict[int, np.ndarray]]:
    i, j = atoms
    e, r = _unit(xyz[i] - xyz[j])
    return r, {i: e, j: -e}


# --- valence angle ---------------------------------------------------------------------

def _angle(xyz: np.ndarray, atoms: tuple[int, ...]) -> tuple[float, dict[int, np.ndarray]]:
    """Angle a-centre-c. Derivative (Wilson): d theta/d x_a = (cos t e_u - e_v)/(r_u sin t)."""
    a, b, c = atoms
    eu, ru = _unit(xyz[a] - xyz[b])
    ev, rv = _unit(xyz[c] - xyz[b])
    cos_t = float(np.dot(eu, ev))
    sin_t = float(np.linalg.norm(_cross(eu, ev)))
    theta = float(np.arctan2(sin_t, cos_t))
    if sin_t < 1e-12:  # straight or folded: the angle has no usable derivative here
        return theta, {i: np.full(3, np.nan) for i in atoms}
    da = (cos_t * eu - ev) / (ru * sin_t)
    dc = (cos_t * ev - eu) / (rv * sin_t)
    return theta, {a: da, c: dc, b: -(da + dc)}


# --- linear bend -----------------------------------------------------------------------

def _linear_bend(xyz: np.ndarray, atoms: tuple[int, ...], w: np.ndarray) -> tuple[float, dict[int, np.ndarray]]:
    """One component of the bend of a near-linear a-centre-c unit.

    q = w . (e_u + e_v), with e_u, e_v the unit vectors from the centre to a and c and w a
    fixed unit vector perpendicular to the a-c axis. e_u + e_v vanishes for a straight unit
    and |e_u + e_v| = 2 cos(theta/2), which equals pi - theta to first order, so q is the
    bend angle (radian) projected on w. Two components (two perpendicular w) describe the
    bend completely. Derivative: d e_u/d x_a = (1 - e_u e_u^T)/r_u.
    """
    a, b, c = atoms
    eu, ru = _unit(xyz[a] - xyz[b])
    ev, rv = _unit(xyz[c] - xyz[b])
    da = (w - np.dot(w, eu) * eu) / ru
    dc = (w - np.dot(w, ev) * ev) / rv
    return float(np.dot(w, eu + ev)), {a: da, c: dc, b: -(da + dc)}


# --- proper dihedral -------------------------------------------------------------------

def _dihedral(xyz: np.ndarray, atoms: tuple[int, ...]) -> tuple[float, dict[int, np.ndarray]]:
    """Dihedral a-b-c-d in (-pi, pi].

    Value from b1 = b - a, b2 = c - b, b3 = d - c: phi = atan2(|b2| b1.(b2 x b3), n1.n2).
    Derivative with F = a - b, G = b - c, H = d - c, A = F x G, B = H x G (Blondel-Karplus).
    """
    a, b, c, d = atoms
    b1, b2, b3 = xyz[b] - xyz[a], xyz[c] - xyz[b], xyz[d] - xyz[c]
    n1, n2 = _cross(b1, b2), _cross(b2, b3)
    g_len = float(np.linalg.norm(b2))
    phi = float(np.arctan2(g_len * np.dot(b1, n2), np.dot(n1, n2)))
    f_vec, g_vec, h_vec = -b1, -b2, b3
    a_vec, b_vec = _cross(f_vec, g_vec), _cross(h_vec, g_vec)
    a2, b2n = float(np.dot(a_vec, a_vec)), float(np.dot(b_vec, b_vec))
    da = -g_len / a2 * a_vec
    dd = g_len / b2n * b_vec
    fg = float(np.dot(f_vec, g_vec)) / (a2 * g_len)
    hg = float(np.dot(h_vec, g_vec)) / (b2n * g_len)
    db = -da + fg * a_vec - hg * b_vec
    dc = -dd - fg * a_vec + hg * b_vec
    return phi, {a: da, b: db, c: dc, d: dd}


# --- out-of-plane angle ----------------------------------------------------------------

def _out_of_plane(xyz: np.ndarray, atoms: tuple[int, ...]) -> tuple[float, dict[int, np.ndarray]]:
    """Angle between the bond centre->d and the plane (centre, a, b); zero when planar.

    q = arcsin(n . e) with n the unit normal of u x v (u = a - centre, v = b - centre) and
    e the unit vector along w = d - centre. With s = n . e and p = ds/d(u x v)
    = (e - s n)/|u x v|: ds/du = v x p, ds/dv = p x u, ds/dw = (n - s e)/|w|.
    """
    centre, a, b, d = atoms
    u, v = xyz[a] - xyz[centre], xyz[b] - xyz[centre]
    n, n_len = _unit(_cross(u, v))
    e, w_len = _unit(xyz[d] - xyz[centre])
    s = float(np.clip(np.dot(n, e), -1.0, 1.0))
    p = (e - s * n) / n_len
    cos_q = np.sqrt(max(1.0 - s * s, 1e-300))
    da, db = _cross(v, p) / cos_q, _cross(p, u) / cos_q
    dd = (n - s * e) / (w_len * cos_q)
    return float(np.arcsin(s)), {a: da, b: db, d: dd, centre: -(da + db + dd)}


def _evaluate(p: Primitive, xyz: np.ndarray) -> tuple[float, dict[int, np.ndarray]]:
    if p.kind == "bond":
        return _bond(xyz, p.atoms)
    if p.kind == "angle":
        return _angle(xyz, p.atoms)
    if p.kind == "linear_bend":
        return _linear_bend(xyz, p.atoms, np.asarray(p.direction, float))
    if p.kind == "dihedral":
        return _dihedral(xyz, p.atoms)
    return _out_of_plane(xyz, p.atoms)


def value(p: Primitive, xyz: np.ndarray) -> float:
    """Value of one primitive: bohr (bond) or radian (all others)."""
    return _evaluate(p, np.asarray(xyz, float))[0]


def row(p: Primitive, xyz: np.ndarray) -> np.ndarray:
    """B-matrix row of one primitive as a dense (natom, 3) array (1 or rad/bohr)."""
    xyz = np.asarray(xyz, float)
    out = np.zeros_like(xyz)
    for atom, deriv in _evaluate(p, xyz)[1].items():
        out[atom] += deriv
    return out


def values(prims: tuple[Primitive, ...] | list[Primitive], xyz: np.ndarray) -> np.ndarray:
    """Values of all primitives, (n,)."""
    xyz = np.asarray(xyz, float)
    return np.array([_evaluate(p, xyz)[0] for p in prims], float)


def b_matrix(prims: tuple[Primitive, ...] | list[Primitive], xyz: np.ndarray) -> np.ndarray:
    """Wilson B matrix B[t, 3*atom + k] = d q_t / d x_(atom, k), shape (n, 3 natom)."""
    xyz = np.asarray(xyz, float)
    bmat = np.zeros((len(prims), xyz.size))
    for t, p in enumerate(prims):
        for atom, deriv in _evaluate(p, xyz)[1].items():
            bmat[t, 3 * atom:3 * atom + 3] += deriv
    return bmat
