"""One internal coordinate (bond, angle, dihedral) of a geometry: its value and how to set it.

Values at the edge are angstrom for bonds and degrees for angles and dihedrals; atoms are
0-based. :func:`drive_coordinate` sets a coordinate by moving the group of atoms on its far
side rigidly (the picture chemists have of stretching a bond or turning a group), falling
back to the smallest change of the redundant internal coordinates inside rings.
"""

from __future__ import annotations

from typing import Sequence

import numpy as np

from ..coords.connectivity import covalent_bonds, neighbours
from ..coords.constraints import Constraint
from ..coords.internal import RedundantInternals
from ..errors import BackTransformError, InputError
from ..geometry import Geometry
from ..units import ANGSTROM_IN_BOHR, BOHR_IN_ANGSTROM

__all__ = ["SCAN_KINDS", "UNITS", "coordinate_value", "drive_coordinate", "companion_targets"]

SCAN_KINDS = {2: "bond", 3: "angle", 4: "dihedral"}
UNITS = {"bond": "angstrom", "angle": "degree", "dihedral": "degree"}


def _kind(atoms: Sequence[int]) -> str:
    kind = SCAN_KINDS.get(len(atoms))
    if kind is None:
        raise InputError(f"a scan coordinate needs 2 (bond), 3 (angle) or 4 (dihedral) atoms, "
                         f"got {len(atoms)}")
    return kind


def coordinate_value(geometry: Geometry, atoms: Sequence[int]) -> float:
    """The coordinate at ``geometry`` in edge units (angstrom or degrees); atoms 0-based."""
    kind = _kind(atoms)
    if kind == "bond":
        return geometry.distance(*atoms) * BOHR_IN_ANGSTROM
    value = geometry.angle(*atoms) if kind == "angle" else geometry.dihedral(*atoms)
    return float(value)


def _constraint(atoms: Sequence[int], value: float) -> Constraint:
    kind = _kind(atoms)
    target = value * ANGSTROM_IN_BOHR if kind == "bond" else float(value)
    return Constraint(kind, tuple(int(a) for a in atoms), target)


def _side(geometry: Geometry, inner: int, outer: int) -> set[int] | None:
    """Atoms bonded to ``outer`` when the ``inner``-``outer`` bond is cut (None: a ring)."""
    bonds = covalent_bonds(geometry.symbols, geometry.coords_bohr)
    partners = neighbours(geometry.natom, bonds)
    seen, todo = {outer}, [outer]
    while todo:
        atom = todo.pop()
        for nxt in partners[atom]:
            if atom == outer and nxt == inner:
                continue
            if nxt == inner:
                return None
            if nxt not in seen:
                seen.add(nxt)
                todo.append(nxt)
    return seen


def _rotate(xyz: np.ndarray, moving: list[int], centre: np.ndarray, axis: np.ndarray,
            angle_rad: float) -> np.ndarray:
    k = axis / np.linalg.norm(axis)
    cos, sin = np.cos(angle_rad), np.sin(angle_rad)
    out = xyz.copy()
    v = xyz[moving] - centre
    out[moving] = (centre + v * cos + np.cross(k, v) * sin
                   + np.outer(v @ k, k) * (1.0 - cos))
    return out


def _group_move(geometry: Geometry, atoms: Sequence[int], value: float,
                frozen: set[int]) -> Geometry | None:
    """Move the group on the last atom's side rigidly (translate along a bond, rotate about
    the angle's normal or the dihedral's axis). None when that group is part of a ring or
    holds a frozen atom."""
    kind = _kind(atoms)
    inner, outer = atoms[-2], atoms[-1]
    if kind == "dihedral":
        inner, outer = atoms[1], atoms[2]
    side = _side(geometry, inner, outer)
    if side is None or side & frozen or set(atoms[:-1 if kind != "dihedral" else 2]) & side:
        return None
    xyz, moving = geometry.coords_bohr, sorted(side)
    now = coordinate_value(geometry, atoms)
    if kind == "bond":
        unit = (xyz[outer] - xyz[inner]) / np.linalg.norm(xyz[outer] - xyz[inner])
        new = xyz.copy()
        new[moving] += (value - now) * ANGSTROM_IN_BOHR * unit
        return geometry.with_coords(new)
    delta = np.radians(value - now)
    if kind == "dihedral":
        delta = float(np.angle(np.exp(1j * delta)))  # shortest way round
        centre, axis = xyz[inner], xyz[outer] - xyz[inner]
    else:
        centre, axis = xyz[inner], np.cross(xyz[atoms[0]] - xyz[inner], xyz[outer] - xyz[inner])
    for sign in (1.0, -1.0):
        moved = geometry.with_coords(_rotate(xyz, moving, centre, axis, sign * delta))
        if abs(_wrapped(coordinate_value(moved, atoms) - value, kind)) < 1e-6:
            return moved
    return None


def _wrapped(difference: float, kind: str) -> float:
    return (difference + 180.0) % 360.0 - 180.0 if kind == "dihedral" else difference


def drive_coordinate(geometry: Geometry, atoms: Sequence[int], value: float,
                     constraints: Sequence[Constraint] = ()) -> Geometry:
    """``geometry`` with one coordinate set to ``value`` (edge units; atoms 0-based).

    The group of atoms on the far side of the coordinate moves rigidly (a bond is stretched,
    an angle opened, a group turned about the dihedral's axis), which is how chemists picture
    the change. Inside rings, or when that group holds a frozen atom, the smallest change of
    the redundant internal coordinates is taken instead. Frozen atoms in ``constraints`` stay
    fixed. Raises BackTransformError when no such geometry is found.
    """
    frozen = {c.atoms[0] for c in constraints if c.kind == "atom"}
    moved = _group_move(geometry, atoms, value, frozen)
    if moved is not None:
        return moved
    held = [c for c in constraints if c.kind == "atom"] + [_constraint(atoms, value)]
    coords = RedundantInternals(geometry.symbols, geometry.coords_bohr, held,
                                max_bond_step_bohr=1e3, max_angle_step_deg=360.0)
    xyz = geometry.coords_bohr
    step = coords.project_step(xyz, np.zeros(len(coords.primitives)))
    outcome = coords.displace_with_report(xyz, step)
    errors = coords.constraint_errors(outcome.coords_bohr)
    if not outcome.converged or np.max(np.abs(errors)) > 1e-6:
        raise BackTransformError(f"could not set the coordinate to {value:g} by a displacement")
    return geometry.with_coords(outcome.coords_bohr)


def companion_targets(geometry: Geometry, atoms: Sequence[int],
                      companions: Sequence[Sequence[int]], value: float) -> list[Constraint]:
    """Constraints moving each companion coordinate by the same amount as the scanned one
    (relative to the start geometry)."""
    kind = _kind(atoms)
    shift = value - coordinate_value(geometry, atoms)
    out = []
    for other in companions:
        if _kind(other) != kind:
            raise InputError(f"companion coordinate {[a + 1 for a in other]} is a "
                             f"{_kind(other)}, the scanned one a {kind}: they must be alike")
        target = coordinate_value(geometry, other) + shift
        if kind == "dihedral":
            target = _wrapped(target, kind)
        out.append(_constraint(other, target))
    return out
