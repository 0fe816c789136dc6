"""Molecular geometry: symbols, coordinates (bohr), charge and spin; XYZ files; alignment.

``Geometry`` is immutable. Coordinates are stored in bohr as a read-only (natom, 3) array;
XYZ files are read and written in angstrom.
"""

from __future__ import annotations

import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Iterable, Sequence

import numpy as np

from . import elements
from .errors import InputError
from .units import ANGSTROM_IN_BOHR, BOHR_IN_ANGSTROM

__all__ = [
    "Geometry",
    "read_xyz",
    "read_xyz_frames",
    "write_xyz",
    "parse_xyz",
    "kabsch_align",
    "rmsd",
]

#: atoms closer than this (angstrom) are considered to sit on top of each other
MIN_DISTANCE_ANGSTROM = 0.3


@dataclass(frozen=True)
class Geometry:
    """A molecule at one geometry.

    Parameters
    ----------
    symbols
        Element symbols, normalized ('c' -> 'C').
    coords_bohr
        Cartesian coordinates, shape (natom, 3), bohr.
    charge
        Total charge.
    spin
        2S, the number of unpaired electrons (0 singlet, 1 doublet, 2 triplet).
    """

    symbols: tuple[str, ...]
    coords_bohr: np.ndarray
    charge: int = 0
    spin: int = 0
    title: str = field(default="", compare=False)

    def __post_init__(self) -> None:
        symbols = tuple(elements.normalize_symbol(s) for s in self.symbols)
        if not symbols:
            raise InputError("a geometry needs at least one atom")
        coords = np.array(self.coords_bohr, dtype=float, copy=True)
        if coords.shape != (len(symbols), 3):
            raise InputError(
                f"coordinates have shape {coords.shape}, expected ({len(symbols)}, 3)"
            )
        if not np.all(np.isfinite(coords)):
            bad = int(np.argwhere(~np.isfinite(coords))[0][0])
            raise InputError(f"atom {bad + 1} ({symbols[bad]}) has a NaN or infinite coordinate")
        coords.setflags(write=False)
        object.__setattr__(self, "symbols", symbols)
        object.__setattr__(self, "coords_bohr", coords)
        object.__setattr__(self, "charge", int(self.charge))
        object.__setattr__(self, "spin", int(self.spin))
        self._check_distances()
        self._check_electrons()

    # ------------------------------------------------------------------ validation
    def _check_distances(self) -> None:
        n = self.natom
        if n < 2:
            return
        d = self.distance_matrix_bohr() * BOHR_IN_ANGSTROM
        d[np.diag_indices(n)] = np.inf
        i, j = np.unravel_index(np.argmin(d), d.shape)
        if d[i, j] < MIN_DISTANCE_ANGSTROM:
            a, b = sorted((int(i), int(j)))
            raise InputError(
                f"atoms {a + 1} ({self.symbols[a]}) and {b + 1} ({self.symbols[b]}) are only "
                f"{d[i, j]:.3f} angstrom apart: atoms on top of each other (check the coordinates "
                "are in angstrom)"
            )

    def _check_electrons(self) -> None:
        nelec = self.nelectron
        if nelec < 0:
            raise InputError(f"charge {self.charge} leaves a negative number of electrons")
        if self.spin < 0:
            raise InputError(f"spin (2S) must be >= 0, got {self.spin}")
        if self.spin > nelec:
            raise InputError(f"spin 2S = {self.spin} exceeds the {nelec} electrons")
        if (nelec - self.spin) % 2:
            raise InputError(
                f"{nelec} electrons (charge {self.charge}) cannot have 2S = {self.spin}: "
                f"use spin {'0 or 2' if nelec % 2 == 0 else '1 or 3'}, or change the charge"
            )

    # ------------------------------------------------------------------ properties
    @property
    def natom(self) -> int:
        return len(self.symbols)

    @property
    def atomic_numbers(self) -> np.ndarray:
        return np.array([elements.atomic_number(s) for s in self.symbols], dtype=int)

    @property
    def nelectron(self) -> int:
        return int(self.atomic_numbers.sum()) - self.charge

    @property
    def masses_amu(self) -> np.ndarray:
        return np.array([elements.mass_amu(s) for s in self.symbols])

    @property
    def coords_angstrom(self) -> np.ndarray:
        return self.coords_bohr * BOHR_IN_ANGSTROM

    def distance_matrix_bohr(self) -> np.ndarray:
        diff = self.coords_bohr[:, None, :] - self.coords_bohr[None, :, :]
        return np.sqrt((diff**2).sum(-1))

    def distance(self, i: int, j: int) -> float:
        """Distance between atoms i and j (0-based), bohr."""
        return float(np.linalg.norm(self.coords_bohr[i] - self.coords_bohr[j]))

    def angle(self, i: int, j: int, k: int) -> float:
        """Angle i-j-k in degrees (0-based atom indices)."""
        a = self.coords_bohr[i] - self.coords_bohr[j]
        b = self.coords_bohr[k] - self.coords_bohr[j]
        c = np.dot(a, b) / (np.linalg.norm(a) * np.linalg.norm(b))
        return math.degrees(math.acos(max(-1.0, min(1.0, c))))

    def dihedral(self, i: int, j: int, k: int, l: int) -> float:
        """Dihedral angle i-j-k-l in degrees, in (-180, 180]."""
        p = self.coords_bohr
        b0, b1, b2 = p[i] - p[j], p[k] - p[j], p[l] - p[k]
        b1n = b1 / np.linalg.norm(b1)
        v = b0 - np.dot(b0, b1n) * b1n
        w = b2 - np.dot(b2, b1n) * b1n
        x = np.dot(v, w)
        y = np.dot(np.cross(b1n, v), w)
        return math.degrees(math.atan2(y, x))

    # ------------------------------------------------------------------ derived geometries
    def with_coords(self, coords_bohr: np.ndarray) -> "Geometry":
        """The same molecule at new coordinates (bohr)."""
        return Geometry(self.symbols, np.asarray(coords_bohr, float).reshape(self.natom, 3),
                        self.charge, self.spin, self.title)

    def with_charge_spin(self, charge: int | None = None, spin: int | None = None) -> "Geometry":
        return Geometry(self.symbols, self.coords_bohr,
                        self.charge if charge is None else charge,
                        self.spin if spin is None else spin, self.title)

    # ------------------------------------------------------------------ XYZ
    def to_xyz(self, comment: str | None = None) -> str:
        """XYZ text (angstrom), one frame."""
        text = self.title if comment is None else comment
        lines = [str(self.natom), text.replace("\n", " ")]
        for s, (x, y, z) in zip(self.symbols, self.coords_angstrom):
            lines.append(f"{s:<2s} {x:16.10f} {y:16.10f} {z:16.10f}")
        return "\n".join(lines) + "\n"

    @classmethod
    def from_angstrom(cls, symbols: Sequence[str], coords_angstrom, charge: int = 0,
                      spin: int = 0, title: str = "") -> "Geometry":
        return cls(tuple(symbols), np.asarray(coords_angstrom, float) * ANGSTROM_IN_BOHR,
                   charge, spin, title)


_FLOAT = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eEdD][-+]?\d+)?"
_ATOM_LINE = re.compile(rf"^\s*([A-Za-z]{{1,3}}|\d{{1,3}})\s+({_FLOAT})\s+({_FLOAT})\s+({_FLOAT})\s*$")


def parse_xyz(text: str, charge: int = 0, spin: int = 0, source: str = "XYZ input") -> list[Geometry]:
    """Parse one or more XYZ frames (angstrom). Returns a list of geometries.

    Raises InputError with the file line number for malformed content.
    """
    lines = text.splitlines()
    frames: list[Geometry] = []
    pos = 0
    while pos < len(lines):
        if not lines[pos].strip():
            pos += 1
            continue
        head = lines[pos].strip()
        try:
            natom = int(head.split()[0])
        except ValueError:
            raise InputError(
                f"{source}, line {pos + 1}: expected the number of atoms, found {head[:40]!r}"
            ) from None
        if natom <= 0:
            raise InputError(f"{source}, line {pos + 1}: the number of atoms must be positive")
        comment = lines[pos + 1] if pos + 1 < len(lines) else ""
        body = lines[pos + 2: pos + 2 + natom]
        atom_rows = [ln for ln in body if ln.strip()]
        if len(atom_rows) < natom:
            raise InputError(
                f"{source}: line {pos + 1} announces {natom} atoms but only {len(atom_rows)} "
                "atom lines follow"
            )
        symbols, coords = [], []
        for k, ln in enumerate(body):
            m = _ATOM_LINE.match(ln)
            if m is None:
                raise InputError(
                    f"{source}, line {pos + 3 + k}: expected 'Symbol x y z' (angstrom), "
                    f"found {ln.strip()[:60]!r}"
                )
            try:
                symbols.append(elements.normalize_symbol(m.group(1)))
            except InputError as exc:
                raise InputError(f"{source}, line {pos + 3 + k}: {exc}") from None
            coords.append([float(m.group(g).replace("d", "e").replace("D", "E")) for g in (2, 3, 4)])
        _check_close_lines(symbols, coords, source, first_line=pos + 3)
        pos += 2 + natom
        # a following line that is neither blank nor a frame header means too many atom lines
        if pos < len(lines) and lines[pos].strip() and _ATOM_LINE.match(lines[pos]):
            raise InputError(
                f"{source}, line {pos + 1}: more atom lines than the {natom} announced"
            )
        frames.append(Geometry.from_angstrom(symbols, coords, charge, spin, comment.strip()))
    if not frames:
        raise InputError(f"{source} is empty: expected an XYZ geometry")
    return frames


def _check_close_lines(symbols: list[str], coords: list[list[float]], source: str,
                       first_line: int) -> None:
    """InputError naming the file lines of two atoms closer than MIN_DISTANCE_ANGSTROM."""
    xyz = np.asarray(coords, float)
    if len(xyz) < 2:
        return
    d = np.sqrt(((xyz[:, None, :] - xyz[None, :, :]) ** 2).sum(-1))
    d[np.diag_indices(len(xyz))] = np.inf
    i, j = sorted(int(k) for k in np.unravel_index(np.argmin(d), d.shape))
    if d[i, j] < MIN_DISTANCE_ANGSTROM:
        raise InputError(
            f"{source}, lines {first_line + i} and {first_line + j}: atoms {i + 1} ({symbols[i]}) "
            f"and {j + 1} ({symbols[j]}) are only {d[i, j]:.3f} angstrom apart (check the "
            "coordinates are in angstrom and no line is repeated)")


def read_xyz_frames(path: str | os.PathLike, charge: int = 0, spin: int = 0) -> list[Geometry]:
    """All frames of a (multi-frame) XYZ file."""
    p = Path(path)
    if not p.exists():
        raise InputError(f"geometry file {str(p)!r} does not exist")
    if p.is_dir():
        raise InputError(f"{str(p)!r} is a directory, expected an XYZ file")
    try:
        text = p.read_text()
    except UnicodeDecodeError:
        raise InputError(f"{str(p)!r} is not a text XYZ file") from None
    return parse_xyz(text, charge, spin, source=str(p))


def read_xyz(path: str | os.PathLike, charge: int = 0, spin: int = 0) -> Geometry:
    """The first (usually only) frame of an XYZ file."""
    frames = read_xyz_frames(path, charge, spin)
    if len(frames) > 1:
        # The last frame of a trajectory is the usual intent; be explicit about it.
        raise InputError(
            f"{str(path)!r} holds {len(frames)} frames; give a single-geometry XYZ file "
            "(e.g. final.xyz of a run)"
        )
    return frames[0]


def write_xyz(path: str | os.PathLike, frames: Geometry | Iterable[Geometry],
              comments: Iterable[str] | None = None, append: bool = False) -> None:
    """Write one or several geometries as (multi-frame) XYZ, angstrom."""
    if isinstance(frames, Geometry):
        frames = [frames]
    frames = list(frames)
    comments = list(comments) if comments is not None else [None] * len(frames)
    text = "".join(g.to_xyz(c) for g, c in zip(frames, comments))
    with open(path, "a" if append else "w") as fh:
        fh.write(text)


def kabsch_align(mobile: np.ndarray, reference: np.ndarray,
                 weights: np.ndarray | None = None) -> tuple[np.ndarray, float]:
    """Rigidly rotate and translate ``mobile`` onto ``reference`` (Kabsch algorithm).

    Both arrays have shape (natom, 3) in the same units. Returns the aligned copy of
    ``mobile`` and the (weighted) RMSD after alignment. Proper rotations only (no reflection).
    """
    P = np.asarray(mobile, float)
    Q = np.asarray(reference, float)
    if P.shape != Q.shape:
        raise InputError(f"cannot align geometries of shapes {P.shape} and {Q.shape}")
    w = np.ones(len(P)) if weights is None else np.asarray(weights, float)
    w = w / w.sum()
    pc = (w[:, None] * P).sum(0)
    qc = (w[:, None] * Q).sum(0)
    P0, Q0 = P - pc, Q - qc
    Hm = (w[:, None] * P0).T @ Q0
    U, _, Vt = np.linalg.svd(Hm)
    d = np.sign(np.linalg.det(Vt.T @ U.T)) or 1.0
    D = np.diag([1.0, 1.0, d])
    R = Vt.T @ D @ U.T
    aligned = P0 @ R.T + qc
    value = float(np.sqrt((w * ((aligned - Q) ** 2).sum(1)).sum()))
    return aligned, value


def rmsd(a: np.ndarray, b: np.ndarray, align: bool = True) -> float:
    """Root-mean-square deviation between two coordinate sets (same units as the input)."""
    if align:
        return kabsch_align(a, b)[1]
    a, b = np.asarray(a, float), np.asarray(b, float)
    return float(np.sqrt(((a - b) ** 2).sum(1).mean()))
