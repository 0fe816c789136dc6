"""Connectivity of a molecule and the redundant set of primitive internal coordinates built on it.

Rules (our choices, documented here once):

* **Covalent bond** between atoms A and B when r_AB < ``bond_scale`` * (R_A + R_B), with R the
  covalent radii of Cordero et al. (``surfcross.elements.covalent_radius_bohr``). Default
  ``bond_scale`` = 1.3: it keeps ordinary and somewhat stretched bonds (C-H up to 1.39 A,
  O-H up to 1.26 A) and excludes hydrogen bonds (H...O ~ 1.9 A) and 1,3 contacts.
* **Fragment links**: while the bond graph has more than one connected piece, the shortest
  contact between two different pieces is added as an extra bond (Kruskal-like), so every
  atom is held by the coordinate set.
* **Angles** a-b-c for every pair of bond partners of b. When the angle exceeds
  ``LINEAR_ANGLE_DEG`` (175 deg) it is replaced by two linear-bend components.
* **Dihedrals** a-b-c-d about every bond b-c. When the chain through b-c is straight (an
  angle at b or c near 180 deg, e.g. O-H...O or C-C#C-C) the dihedral is taken about the two
  end atoms of the straight chain instead; dihedrals that stay undefined are skipped.
  ``RedundantInternals.missing_motions`` reports any motion the set still misses.
* **Out-of-plane** angle for every atom with exactly three bond partners whose three bond
  angles add up to at least ``PLANAR_SUM_DEG`` (330 deg, i.e. near-planar centres such as the
  carbon of formaldehyde), because there pyramidalization changes the angles only to
  second order.
"""

from __future__ import annotations

import itertools

import numpy as np

from ..elements import covalent_radius_bohr
from .primitives import Primitive, value

__all__ = [
    "DEFAULT_BOND_SCALE",
    "LINEAR_ANGLE_DEG",
    "PLANAR_SUM_DEG",
    "covalent_bonds",
    "fragment_links",
    "build_primitives",
    "bend_directions",
    "neighbours",
]

DEFAULT_BOND_SCALE = 1.3
LINEAR_ANGLE_DEG = 175.0
PLANAR_SUM_DEG = 330.0


def _distances(xyz: np.ndarray) -> np.ndarray:
    return np.linalg.norm(xyz[:, None, :] - xyz[None, :, :], axis=-1)


def covalent_bonds(symbols: tuple[str, ...], xyz: np.ndarray, scale: float = DEFAULT_BOND_SCALE) -> set[tuple[int, int]]:
    """Pairs (i, j), i < j, closer than scale * (R_i + R_j) (covalent radii, bohr)."""
    radii = np.array([covalent_radius_bohr(s) for s in symbols])
    dist = _distances(np.asarray(xyz, float))
    limit = scale * (radii[:, None] + radii[None, :])
    n = len(symbols)
    return {(i, j) for i in range(n) for j in range(i + 1, n) if dist[i, j] < limit[i, j]}


def _pieces(natom: int, bonds: set[tuple[int, int]]) -> list[int]:
    """Label of the connected piece of each atom (union-find)."""
    parent = list(range(natom))

    def root(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = parent[i]
        return i

    for i, j in bonds:
        parent[root(i)] = root(j)
    return [root(i) for i in range(natom)]


def fragment_links(xyz: np.ndarray, bonds: set[tuple[int, int]]) -> list[tuple[int, int]]:
    """Shortest inter-piece contacts that join all pieces into one connected graph."""
    xyz = np.asarray(xyz, float)
    dist = _distances(xyz)
    current = set(bonds)
    links: list[tuple[int, int]] = []
    while True:
        piece = np.array(_pieces(len(xyz), current))
        if len(set(piece.tolist())) <= 1:
            return links
        masked = np.where(piece[:, None] != piece[None, :], dist, np.inf)
        i, j = np.unravel_index(int(np.argmin(masked)), masked.shape)
        pair = (int(min(i, j)), int(max(i, j)))
        links.append(pair)
        current.add(pair)


def neighbours(natom: int, bonds: set[tuple[int, int]] | list[tuple[int, int]]) -> list[list[int]]:
    """Sorted bond partners of every atom."""
    partners: list[set[int]] = [set() for _ in range(natom)]
    for i, j in bonds:
        partners[i].add(j)
        partners[j].add(i)
    return [sorted(p) for p in partners]


def bend_directions(xyz: np.ndarray, a: int, c: int) -> tuple[np.ndarray, np.ndarray]:
    """Two orthonormal lab-frame vectors perpendicular to the a-c axis."""
    axis = xyz[c] - xyz[a]
    axis = axis / np.linalg.norm(axis)
    helper = np.eye(3)[int(np.argmin(np.abs(axis)))]
    w1 = np.cross(axis, helper)
    w1 /= np.linalg.norm(w1)
    return w1, np.cross(axis, w1)


def _angle_deg(xyz: np.ndarray, a: int, b: int, c: int) -> float:
    return float(np.degrees(value(Primitive("angle", (a, b, c)), xyz)))


def _bends(xyz: np.ndarray, partners: list[list[int]]) -> list[Primitive]:
    prims: list[Primitive] = []
    for b, nbrs in enumerate(partners):
        for a, c in itertools.combinations(nbrs, 2):
            if _angle_deg(xyz, a, b, c) < LINEAR_ANGLE_DEG:
                prims.append(Primitive("angle", (a, b, c)))
                continue
            for w in bend_directions(xyz, a, c):
                prims.append(Primitive("linear_bend", (a, b, c), direction=tuple(float(x) for x in w)))
    return prims


def _chain_end(xyz: np.ndarray, partners: list[list[int]], end: int, inner: int, chain: set[int]) -> int:
    """Walk outward from ``end`` (coming from ``inner``) while the chain stays straight."""
    while True:
        nxt = [n for n in partners[end] if n not in chain and _angle_deg(xyz, n, end, inner) >= LINEAR_ANGLE_DEG]
        if not nxt:
            return end
        chain.add(nxt[0])
        end, inner = nxt[0], end


def _dihedrals(xyz: np.ndarray, bonds: list[tuple[int, int]], partners: list[list[int]]) -> list[Primitive]:
    """Dihedrals about every bond; about the end atoms of the chain when it is straight.

    For a straight chain x-A-B...C-y (e.g. O-H...O in a hydrogen bond, or C-C#C-C) the
    dihedral about the middle bond is undefined; the twist is then described by x-A...C-y
    taken about the two ends of the straight chain.
    """
    found: dict[tuple[int, ...], Primitive] = {}
    for b, c in bonds:
        chain = {b, c}
        left = _chain_end(xyz, partners, b, c, chain)
        right = _chain_end(xyz, partners, c, b, chain)
        for a in partners[left]:
            for d in partners[right]:
                if a in chain or d in chain or a == d:
                    continue
                if max(_angle_deg(xyz, a, left, right), _angle_deg(xyz, left, right, d)) >= LINEAR_ANGLE_DEG:
                    continue
                key = (a, left, right, d) if left < right else (d, right, left, a)
                found.setdefault(key, Primitive("dihedral", key))
    return list(found.values())


def _out_of_planes(xyz: np.ndarray, partners: list[list[int]]) -> list[Primitive]:
    prims: list[Primitive] = []
    for centre, nbrs in enumerate(partners):
        if len(nbrs) != 3:
            continue
        pairs = list(itertools.combinations(nbrs, 2))
        angles = [_angle_deg(xyz, a, centre, b) for a, b in pairs]
        if sum(angles) < PLANAR_SUM_DEG or max(angles) >= LINEAR_ANGLE_DEG:
            continue
        # the plane is spanned by the pair whose angle is farthest from 0 and 180 deg
        a, b = pairs[int(np.argmin([abs(ang - 90.0) for ang in angles]))]
        (d,) = set(nbrs) - {a, b}
        prims.append(Primitive("out_of_plane", (centre, a, b, d)))
    return prims


def build_primitives(
    symbols: tuple[str, ...], xyz: np.ndarray, bond_scale: float = DEFAULT_BOND_SCALE
) -> tuple[list[Primitive], set[tuple[int, int]]]:
    """The redundant primitive set for this geometry.

    Returns
    -------
    prims
        Bonds (covalent, then fragment links), angles/linear bends, dihedrals, out-of-plane.
    bonds
        The covalent bond set (without links), used later to detect connectivity changes.
    """
    xyz = np.asarray(xyz, float)
    bonds = covalent_bonds(symbols, xyz, bond_scale)
    links = fragment_links(xyz, bonds)
    all_bonds = sorted(bonds) + links
    partners = neighbours(len(symbols), all_bonds)
    prims = [Primitive("bond", pair) for pair in sorted(bonds)]
    prims += [Primitive("bond", pair, link=True) for pair in links]
    prims += _bends(xyz, partners)
    prims += _dihedrals(xyz, all_bonds, partners)
    prims += _out_of_planes(xyz, partners)
    return prims, bonds
