"""Geometric constraints: frozen atoms and fixed bonds, angles and dihedrals."""

from __future__ import annotations

from dataclasses import dataclass

from ..errors import InputError

__all__ = ["Constraint", "KINDS"]

KINDS = {"atom": 1, "bond": 2, "angle": 3, "dihedral": 4}


@dataclass(frozen=True)
class Constraint:
    """One constraint. Atom indices are 0-based.

    kind
        'atom' (frozen Cartesian position), 'bond', 'angle' or 'dihedral'.
    atoms
        1, 2, 3 or 4 atom indices.
    target
        None to hold the start value; otherwise bohr for bonds, degrees for angles/dihedrals.
    """

    kind: str
    atoms: tuple[int, ...]
    target: float | None = None

    def __post_init__(self) -> None:
        if self.kind not in KINDS:
            raise InputError(f"unknown constraint kind {self.kind!r}: use {', '.join(KINDS)}")
        atoms = tuple(int(a) for a in self.atoms)
        if len(atoms) != KINDS[self.kind]:
            raise InputError(f"a {self.kind} constraint needs {KINDS[self.kind]} atom(s), got {len(atoms)}")
        if len(set(atoms)) != len(atoms) or min(atoms) < 0:
            raise InputError(f"constraint atoms {atoms} must be distinct and >= 0")
        if self.kind == "atom" and self.target is not None:
            raise InputError("a frozen-atom constraint takes no target value")
        object.__setattr__(self, "atoms", atoms)

    def check(self, natom: int) -> None:
        if max(self.atoms) >= natom:
            raise InputError(f"constraint on atom {max(self.atoms) + 1}, but the molecule has {natom} atoms")
