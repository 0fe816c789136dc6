"""Point-group symmetry of a geometry and the irreducible representation of every state.

Found here, in the input frame, without reorienting the molecule or changing any surface:

1. **Operations.** The identity, the inversion, two-fold rotations and mirror planes about
   candidate axes through the centre of mass (principal axes of inertia, directions to atoms,
   to midpoints of atom pairs and normals of planes through pairs of atoms). An operation
   belongs to the geometry when it maps every atom onto an atom of the same element within
   ``tolerance_bohr`` (0.02 bohr by default, so a molecule 1e-3 angstrom away from a symmetric
   structure gets that structure's group). Of the operations found, the largest set that lies
   along three orthogonal axes is kept: D2h or one of its subgroups (C1, Cs, Ci, C2, C2v, C2h,
   D2), the abelian groups whose irreducible representations are one-dimensional.
2. **Characters.** An operation R acts on the atomic orbitals as a matrix U (each shell of
   atom a goes to the same shell of its image, rotated by R; the rotation within a shell is
   found by evaluating the shell at points around its centre and at their images, a small
   least-squares fit), so the state R Psi has molecular orbitals U C and the same amplitudes.
   The character of state I is the exact CIS/TDA overlap <Psi_I | R Psi_I> (the machinery of
   :mod:`surfcross.tracking.overlap`), +1 or -1 for a state of pure symmetry.
3. **Names.** Mulliken's labels of the group's character table, with the axes named as usual:
   z along the (main) two-fold axis; for C2v the molecular plane (the mirror that holds more
   atoms) is yz; for D2 and D2h z is the axis through the most atoms and x the axis normal to
   the plane that holds the most atoms.

A state whose characters are not all near +/-1 (|chi| < ``CHARACTER_MIN``: the geometry is
further from symmetric than the tolerance, or two degenerate states mix) gets no irrep
(None). Irreps are labels of the states at one geometry; they say whether two states can mix
under the symmetry that geometry has, nothing about lower-symmetry geometries nearby.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass, replace
from typing import Any, Sequence

import numpy as np

from .base import Evaluation

__all__ = ["SymmetryOperation", "PointGroup", "find_point_group", "state_irreps",
           "label_irreps", "symmetric_displacements", "vibration_irreps", "can_mix",
           "irrep_product", "TOLERANCE_BOHR", "CHARACTER_MIN"]

#: largest mismatch (bohr) of an atom and the image of an atom for an operation to count
TOLERANCE_BOHR = 0.02
#: smallest |character| taken as a state of pure symmetry
CHARACTER_MIN = 0.9
_PARALLEL = 1e-6

#: character tables: the operations' names in order, and each irrep's characters
TABLES: dict[str, tuple[tuple[str, ...], dict[str, tuple[int, ...]]]] = {
    "C1": (("E",), {"A": (1,)}),
    "Cs": (("E", "sh"), {"A'": (1, 1), "A''": (1, -1)}),
    "Ci": (("E", "i"), {"Ag": (1, 1), "Au": (1, -1)}),
    "C2": (("E", "C2z"), {"A": (1, 1), "B": (1, -1)}),
    "C2v": (("E", "C2z", "sxz", "syz"),
            {"A1": (1, 1, 1, 1), "A2": (1, 1, -1, -1), "B1": (1, -1, 1, -1),
             "B2": (1, -1, -1, 1)}),
    "C2h": (("E", "C2z", "i", "sxy"),
            {"Ag": (1, 1, 1, 1), "Bg": (1, -1, 1, -1), "Au": (1, 1, -1, -1),
             "Bu": (1, -1, -1, 1)}),
    "D2": (("E", "C2z", "C2y", "C2x"),
           {"A": (1, 1, 1, 1), "B1": (1, 1, -1, -1), "B2": (1, -1, 1, -1),
            "B3": (1, -1, -1, 1)}),
    "D2h": (("E", "C2z", "C2y", "C2x", "i", "sxy", "sxz", "syz"),
            {"Ag": (1, 1, 1, 1, 1, 1, 1, 1), "B1g": (1, 1, -1, -1, 1, 1, -1, -1),
             "B2g": (1, -1, 1, -1, 1, -1, 1, -1), "B3g": (1, -1, -1, 1, 1, -1, -1, 1),
             "Au": (1, 1, 1, 1, -1, -1, -1, -1), "B1u": (1, 1, -1, -1, -1, -1, 1, 1),
             "B2u": (1, -1, 1, -1, -1, 1, -1, 1), "B3u": (1, -1, -1, 1, -1, 1, 1, -1)}),
}


@dataclass(frozen=True)
class SymmetryOperation:
    """r -> centre + matrix (r - centre); atom a goes to atom ``permutation[a]``."""

    name: str
    matrix: np.ndarray
    permutation: tuple[int, ...]
    centre: np.ndarray
    deviation_bohr: float = 0.0


@dataclass(frozen=True)
class PointGroup:
    """The abelian point group of a geometry: its name and operations (identity first)."""

    name: str
    operations: tuple[SymmetryOperation, ...]

    @property
    def order(self) -> int:
        return len(self.operations)

    @property
    def deviation_bohr(self) -> float:
        """Largest mismatch of an atom and its image over the operations (0 when exact)."""
        return max(op.deviation_bohr for op in self.operations)

    def irrep(self, characters: Sequence[float]) -> str | None:
        """Mulliken label of a state with these characters (one per operation), or None."""
        chars = np.asarray(characters, float)
        if np.any(np.abs(chars) < CHARACTER_MIN):
            return None
        signs = tuple(int(np.sign(c)) for c in chars)
        for name, row in TABLES[self.name][1].items():
            if row == signs:
                return name
        return None


def _masses(symbols: Sequence[str]) -> np.ndarray:
    from .. import elements

    return np.array([elements.mass_amu(s) for s in symbols])


def _match(symbols: Sequence[str], coords: np.ndarray, centre: np.ndarray, matrix: np.ndarray,
           tol: float) -> tuple[tuple[int, ...], float] | None:
    """Atom permutation of an operation and its largest mismatch, or None."""
    images = centre + (coords - centre) @ matrix.T
    perm, worst, used = [], 0.0, set()
    for a, img in enumerate(images):
        d = np.linalg.norm(coords - img, axis=1)
        candidates = [b for b in np.argsort(d) if symbols[b] == symbols[a] and b not in used]
        if not candidates or d[candidates[0]] > tol:
            return None
        b = int(candidates[0])
        used.add(b)
        perm.append(b)
        worst = max(worst, float(d[b]))
    return tuple(perm), worst


def _candidate_axes(symbols, coords: np.ndarray, masses: np.ndarray, centre: np.ndarray,
                    tol: float) -> list[np.ndarray]:
    """Principal axes, directions to atoms, and for pairs of equivalent-looking atoms (same
    element, same distance from the centre) their midpoint directions, differences and plane
    normals: every two-fold axis or mirror normal of an abelian group is among them."""
    rel = coords - centre
    inertia = np.eye(3) * (masses * (rel ** 2).sum(1)).sum() - (masses[:, None] * rel).T @ rel
    axes = list(np.linalg.eigh(inertia)[1].T)
    radius = np.linalg.norm(rel, axis=1)
    pairs = [(a, b) for a, b in itertools.combinations(range(len(rel)), 2)
             if symbols[a] == symbols[b] and abs(radius[a] - radius[b]) < 2 * tol]
    vectors = [r for r in rel]
    vectors += [rel[a] + rel[b] for a, b in pairs] + [rel[a] - rel[b] for a, b in pairs]
    vectors += [np.cross(rel[a], rel[b]) for a, b in pairs]
    for v in vectors:
        n = np.linalg.norm(v)
        if n > 1e-3:
            axes.append(v / n)
    unique: list[np.ndarray] = []
    for a in axes:
        if all(abs(abs(float(a @ u)) - 1.0) > _PARALLEL for u in unique):
            unique.append(a)
    return unique


def _elements(symbols, coords, centre, tol) -> list[tuple[str, np.ndarray | None, SymmetryOperation]]:
    """Every two-fold axis, mirror plane (by its normal) and the inversion of the geometry."""
    masses = _masses(symbols)
    found = []
    inv = _match(symbols, coords, centre, -np.eye(3), tol)
    if inv is not None:
        found.append(("i", None, SymmetryOperation("i", -np.eye(3), inv[0], centre, inv[1])))
    for axis in _candidate_axes(symbols, coords, masses, centre, tol):
        nn = np.outer(axis, axis)
        for kind, matrix in (("C2", 2.0 * nn - np.eye(3)), ("s", np.eye(3) - 2.0 * nn)):
            hit = _match(symbols, coords, centre, matrix, tol)
            if hit is not None:
                found.append((kind, axis, SymmetryOperation(kind, matrix, hit[0], centre, hit[1])))
    return found


def _group_name(kinds: list[str]) -> str:
    c2, s, i = kinds.count("C2"), kinds.count("s"), kinds.count("i")
    return {(0, 0, 0): "C1", (0, 1, 0): "Cs", (0, 0, 1): "Ci", (1, 0, 0): "C2",
            (1, 2, 0): "C2v", (1, 1, 1): "C2h", (3, 0, 0): "D2",
            (3, 3, 1): "D2h"}.get((c2, s, i), "C1")


def _frames(elements) -> list[np.ndarray]:
    """Orthonormal frames (rows = axes) spanned by the symmetry elements found."""
    dirs = [axis for _, axis, _ in elements if axis is not None]
    frames = []
    for a in dirs:
        others = [b for b in dirs if abs(float(a @ b)) < 1e-2]
        for b in others or [None]:
            if b is None:
                b = np.linalg.svd(np.atleast_2d(a))[2][1]
            b = b - (b @ a) * a  # exactly orthonormal
            b = b / np.linalg.norm(b)
            frames.append(np.array([a, b, np.cross(a, b)]))
    return frames or [np.eye(3)]


def _in_frame(elements, frame: np.ndarray, symbols, coords, centre, tol):
    """The elements along the frame's axes, each rebuilt exactly on its axis (so that the
    operations form a group), one per kind and axis."""
    out, seen = [], set()
    for kind, axis, op in elements:
        if axis is None:
            k = None
        else:
            k = int(np.argmax(np.abs(frame @ axis)))
            if abs(abs(float(frame[k] @ axis)) - 1.0) > 1e-2 or (kind, k) in seen:
                continue
            nn = np.outer(frame[k], frame[k])
            matrix = 2.0 * nn - np.eye(3) if kind == "C2" else np.eye(3) - 2.0 * nn
            hit = _match(symbols, coords, centre, matrix, tol)
            if hit is None:
                continue
            op = SymmetryOperation(kind, matrix, hit[0], centre, hit[1])
        if (kind, k) not in seen:
            seen.add((kind, k))
            out.append((kind, k, op))
    return out


def find_point_group(symbols: Sequence[str], coords_bohr: Any,
                     tolerance_bohr: float = TOLERANCE_BOHR) -> PointGroup:
    """The largest abelian point group (D2h or a subgroup) of a geometry (see the module
    docstring); operations are named as in :data:`TABLES`."""
    symbols = tuple(symbols)
    coords = np.asarray(coords_bohr, float).reshape(-1, 3)
    masses = _masses(symbols)
    centre = (masses[:, None] * coords).sum(0) / masses.sum()
    identity = SymmetryOperation("E", np.eye(3), tuple(range(len(symbols))), centre, 0.0)
    elements = _elements(symbols, coords, centre, tolerance_bohr)
    best: tuple[int, str, list, np.ndarray] | None = None
    for frame in _frames(elements):
        chosen = _in_frame(elements, frame, symbols, coords, centre, tolerance_bohr)
        kinds = [k for k, _, _ in chosen]
        name = _group_name(kinds)
        order = len(TABLES[name][0])
        if best is None or order > best[0]:
            best = (order, name, chosen, frame)
    order, name, chosen, frame = best
    if name == "C1":
        return PointGroup("C1", (identity,))
    if len(chosen) + 1 != order:  # e.g. an inversion with no frame: keep it alone
        chosen = [c for c in chosen if c[0] == "i"] if name == "Ci" else chosen
    axes = _name_axes(name, chosen, frame, symbols, coords, centre, tolerance_bohr)
    ops = {"E": identity}
    for kind, k, op in chosen:
        ops[_op_name(kind, k, axes)] = replace(op, name=_op_name(kind, k, axes))
    names = TABLES[name][0]
    if set(names) != set(ops):
        return PointGroup("C1", (identity,))
    return PointGroup(name, tuple(ops[n] for n in names))


def _on_axis(axis: np.ndarray, rel: np.ndarray, tol: float) -> int:
    return int((np.linalg.norm(rel - np.outer(rel @ axis, axis), axis=1) < tol).sum())


def _in_plane(normal: np.ndarray, rel: np.ndarray, tol: float) -> int:
    return int((np.abs(rel @ normal) < tol).sum())


def _name_axes(name, chosen, frame, symbols, coords, centre, tol) -> dict[int, str]:
    """Which frame axis (0, 1, 2) is x, y and z, by the conventions of the module docstring."""
    rel = coords - centre
    c2 = [k for kind, k, _ in chosen if kind == "C2"]
    mirrors = [k for kind, k, _ in chosen if kind == "s"]
    if name in ("C2", "C2h", "C2v"):
        z = c2[0]
        rest = [k for k in range(3) if k != z]
        if name == "C2v":  # x is the normal of the mirror holding more atoms (yz plane)
            rest.sort(key=lambda k: -_in_plane(frame[k], rel, tol))
        return {rest[0]: "x", rest[1]: "y", z: "z"}
    if name in ("D2", "D2h"):
        z = max(range(3), key=lambda k: (_on_axis(frame[k], rel, tol), -k))
        rest = sorted((k for k in range(3) if k != z),
                      key=lambda k: (-_in_plane(frame[k], rel, tol), k))
        return {rest[0]: "x", rest[1]: "y", z: "z"}
    if name == "Cs":
        return {mirrors[0]: "z"}
    return {}


def _op_name(kind: str, k: int | None, axes: dict[int, str]) -> str:
    if kind == "i":
        return "i"
    ax = axes.get(k, "z")
    if kind == "C2":
        return f"C2{ax}"
    plane = "".join(sorted({"x", "y", "z"} - {ax}))
    return "sh" if len(axes) == 1 else f"s{plane}"


# ---------------------------------------------------------------------- orbitals and states
def _shell_rotation(mol: Any, shell: int, matrix: np.ndarray) -> np.ndarray:
    """D with f(R^-1 d) = f(d) D for the functions f of one shell (offset d from its centre)."""
    l = int(mol.bas_angular(shell))
    start, stop = mol.ao_loc_nr()[shell], mol.ao_loc_nr()[shell + 1]
    n = stop - start
    if l == 0:
        return np.eye(n)
    centre = mol.bas_coord(shell)
    rng = np.random.default_rng(7)
    u = rng.standard_normal((4 * n + 8, 3))
    u = 0.3 * u / np.linalg.norm(u, axis=1)[:, None]
    kind = "GTOval_cart" if mol.cart else "GTOval_sph"
    f = mol.eval_gto(kind, centre + u, shls_slice=(shell, shell + 1))
    f_rot = mol.eval_gto(kind, centre + u @ matrix, shls_slice=(shell, shell + 1))  # R^-1 = R^T
    return np.linalg.lstsq(f, f_rot, rcond=None)[0]


def ao_representation(mol: Any, op: SymmetryOperation) -> np.ndarray:
    """U (nao, nao) with R chi_nu = sum_mu chi_mu U[mu, nu] (input frame, this basis)."""
    loc = mol.ao_loc_nr()
    U = np.zeros((loc[-1], loc[-1]))
    by_atom: dict[int, list[int]] = {}
    for shell in range(mol.nbas):
        by_atom.setdefault(int(mol.bas_atom(shell)), []).append(shell)
    cache: dict[tuple[str, int], np.ndarray] = {}
    for a, shells in by_atom.items():
        b = op.permutation[a]
        for j, shell in enumerate(shells):
            key = (mol.atom_symbol(a), j)
            if key not in cache:
                cache[key] = _shell_rotation(mol, shell, op.matrix)
            image = by_atom[b][j]
            U[loc[image]:loc[image + 1], loc[shell]:loc[shell + 1]] = cache[key]
    return U


def state_irreps(evaluation: Evaluation, group: PointGroup, mol: Any) -> dict[Any, str | None]:
    """{label: irrep or None} of every state of a response evaluation in ``group``."""
    from ..tracking.overlap import manifold_overlaps
    from .wavefunction import ManifoldWavefunction, ReferenceWavefunction

    wfn = evaluation.wavefunction
    s_ao = mol.intor_symmetric("int1e_ovlp")
    chars: dict[Any, list[float]] = {s.label: [] for s in evaluation.states}
    for op in group.operations:
        U = ao_representation(mol, op)
        for manifold, mwf in wfn.manifolds.items():
            ref = mwf.reference
            coeff = U @ ref.mo_coeff if ref.restricted else np.array([U @ c for c in ref.mo_coeff])
            moved = ManifoldWavefunction(
                reference=ReferenceWavefunction(mo_coeff=coeff, mo_occ=ref.mo_occ,
                                                restricted=ref.restricted),
                includes_reference=mwf.includes_reference, coupling=mwf.coupling,
                amplitudes=mwf.amplitudes)
            diagonal = np.diag(manifold_overlaps(mwf, moved, s_ao))
            for state, chi in zip(evaluation.manifold(manifold), diagonal):
                chars[state.label].append(float(chi))
    return {label: group.irrep(c) if len(c) == group.order else None
            for label, c in chars.items()}


def label_irreps(evaluation: Evaluation, irreps: dict[Any, str | None],
                 group: PointGroup) -> Evaluation:
    """A copy of ``evaluation`` with ``point_group`` and every StateInfo's ``irrep`` set."""
    states = tuple(replace(s, irrep=irreps.get(s.label)) for s in evaluation.states)
    return replace(evaluation, states=states, point_group=group.name)


def symmetric_displacements(group: PointGroup, natom: int) -> np.ndarray:
    """Orthonormal basis (k, 3N) of the Cartesian displacements that keep ``group``.

    The projector is the group average of the operations acting on displacements
    ((T d)_{perm[a]} = R d_a); its range is the space of totally symmetric displacements.
    """
    n = 3 * natom
    S = np.zeros((n, n))
    for op in group.operations:
        T = np.zeros((n, n))
        for a, b in enumerate(op.permutation):
            T[3 * b:3 * b + 3, 3 * a:3 * a + 3] = op.matrix
        S += T
    S /= group.order
    w, v = np.linalg.eigh(0.5 * (S + S.T))
    return v[:, w > 0.5].T


def _representation(op: SymmetryOperation, natom: int) -> np.ndarray:
    n = 3 * natom
    T = np.zeros((n, n))
    for a, b in enumerate(op.permutation):
        T[3 * b:3 * b + 3, 3 * a:3 * a + 3] = op.matrix
    return T


def _rigid_basis(coords: np.ndarray, centre: np.ndarray) -> np.ndarray:
    rel = coords - centre
    vecs = []
    for k in range(3):
        t = np.zeros_like(coords)
        t[:, k] = 1.0
        vecs.append(t.ravel())
        axis = np.zeros(3)
        axis[k] = 1.0
        vecs.append(np.cross(axis, rel).ravel())
    u, s, _ = np.linalg.svd(np.array(vecs).T, full_matrices=False)
    return u[:, s > 1e-6 * s.max()].T


def vibration_irreps(group: PointGroup, coords_bohr: Any) -> dict[str, int]:
    """How many internal (vibrational) displacements of each irrep the geometry has."""
    coords = np.asarray(coords_bohr, float).reshape(-1, 3)
    natom = len(coords)
    V = _rigid_basis(coords, group.operations[0].centre)
    P_int = np.eye(3 * natom) - V.T @ V
    reps = [_representation(op, natom) for op in group.operations]
    out = {}
    for name, row in TABLES[group.name][1].items():
        P = sum(c * T for c, T in zip(row, reps)) / group.order
        M = P @ P_int @ P.T
        out[name] = int((np.linalg.eigvalsh(0.5 * (M + M.T)) > 0.5).sum())
    return out


def can_mix(group: PointGroup, irrep_a: str, irrep_b: str, modes: dict[str, int]) -> bool:
    """True when some nuclear motion can couple states of these irreps.

    The coupling of the two states is a function of the displacements with the symmetry
    irrep_a x irrep_b; for an abelian group it can be non-zero only when that product lies in
    the set of irreps generated by products of the vibrations present (a product of modes of
    those irreps has the product symmetry). Equal irreps always mix.
    """
    table = TABLES[group.name][1]
    rows = {name: np.array(row) for name, row in table.items()}
    target = tuple(rows[irrep_a] * rows[irrep_b])
    reached = {tuple(rows[next(iter(table))])}  # the totally symmetric irrep
    present = [rows[n] for n, count in modes.items() if count > 0]
    grown = True
    while grown:
        new = {tuple(np.array(r) * p) for r in reached for p in present} | reached
        grown = new != reached
        reached = new
    return target in reached


def irrep_product(group: PointGroup, irrep_a: str, irrep_b: str) -> str:
    table = TABLES[group.name][1]
    target = tuple(np.array(table[irrep_a]) * np.array(table[irrep_b]))
    return next(n for n, row in table.items() if row == target)
